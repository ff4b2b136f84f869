#include "stabilizer.hpp"
#include "errors.hpp"

#include <flint/flint.h>
#include <flint/nmod_mat.h>
#include <flint/nmod_vec.h>
#include <flint/ulong_extras.h>
#include <m4ri/m4ri.h>

#include <algorithm>
#include <cmath>
#include <map>
#include <memory>
#include <numeric>
#include <sstream>
#include <stdexcept>

namespace toral {
namespace {

using u64 = std::uint64_t;
using i64 = std::int64_t;

struct PrimePower {
  u64 p;
  int e;
};

std::vector<PrimePower> factorize(u64 N) {
  n_factor_t f;
  n_factor_init(&f);
  n_factor(&f, N, 1);
  std::vector<PrimePower> r;
  for (int i = 0; i < f.num; ++i) r.push_back({f.p[i], static_cast<int>(f.exp[i])});
  std::sort(r.begin(), r.end(), [](const PrimePower& x, const PrimePower& y) { return x.p < y.p; });
  return r;
}

std::string factor_string(const std::vector<PrimePower>& f) {
  std::ostringstream os;
  for (std::size_t i = 0; i < f.size(); ++i) {
    os << (i ? "*" : "") << f[i].p;
    if (f[i].e > 1) os << '^' << f[i].e;
  }
  return os.str();
}

// x mod N in [0, N) for any int64 x (no overflow, also for INT64_MIN).
u64 mod_reduce(i64 x, u64 N) {
  if (x >= 0) return static_cast<u64>(x) % N;
  const u64 y = static_cast<u64>(-(x + 1));  // x = -(y + 1), y >= 0
  return N - 1 - y % N;
}

// ---------------------------------------------------------------------------
// The problem mod N: S in interleaved coordinates (2i = q_i, 2i+1 = p_i),
// compressed by output coordinate, and the site labels.
struct Problem {
  i64 L = 0;
  u64 N = 0;
  i64 D = 0;  // largest cyclic distance |c - c'| (mod 2L) of a nonzero S entry
  std::vector<i64> rowptr, col;
  std::vector<u64> val;
  std::vector<u64> a, b;
};

i64 interleaved(i64 g, i64 L) { return g < L ? 2 * g : 2 * (g - L) + 1; }

// The representative d of (i - j) mod m with |d| = cyclic distance.
i64 cyclic_offset(i64 i, i64 j, i64 m) {
  i64 d = (i - j) % m;
  if (d < 0) d += m;
  if (d > m / 2) d -= m;
  return d;
}

Problem reduce_to(const Problem& P, u64 p) {
  Problem r;
  r.L = P.L;
  r.N = p;
  r.rowptr.assign(1, 0);
  const i64 m = 2 * P.L;
  for (i64 i = 0; i < m; ++i) {
    for (i64 k = P.rowptr[i]; k < P.rowptr[i + 1]; ++k) {
      const u64 v = P.val[k] % p;
      if (v == 0) continue;
      r.col.push_back(P.col[k]);
      r.val.push_back(v);
      r.D = std::max(r.D, std::abs(cyclic_offset(i, P.col[k], m)));
    }
    r.rowptr.push_back(static_cast<i64>(r.col.size()));
  }
  for (u64 x : P.a) r.a.push_back(x % p);
  for (u64 x : P.b) r.b.push_back(x % p);
  return r;
}

// The same problem with sites relabelled s -> (s - r) mod L, so that the arc
// starting at site r becomes a prefix of the interleaved order.
Problem rotate(const Problem& P, i64 r) {
  const i64 L = P.L, m = 2 * L;
  auto coord = [&](i64 c) { return 2 * (((c / 2 - r) % L + L) % L) + c % 2; };
  std::vector<i64> old_of(static_cast<std::size_t>(m));
  for (i64 c = 0; c < m; ++c) old_of[coord(c)] = c;
  Problem q;
  q.L = L;
  q.N = P.N;
  q.rowptr.assign(1, 0);
  for (i64 i = 0; i < m; ++i) {
    const i64 o = old_of[i];
    for (i64 k = P.rowptr[o]; k < P.rowptr[o + 1]; ++k) {
      q.col.push_back(coord(P.col[k]));
      q.val.push_back(P.val[k]);
      q.D = std::max(q.D, std::abs(cyclic_offset(i, q.col.back(), m)));
    }
    q.rowptr.push_back(static_cast<i64>(q.col.size()));
  }
  q.a.resize(P.a.size());
  q.b.resize(P.b.size());
  for (i64 s = 0; s < L; ++s) {
    q.a[((s - r) % L + L) % L] = P.a[s];
    q.b[((s - r) % L + L) % L] = P.b[s];
  }
  return q;
}

Problem prepare(const Circuit& c, i64 N, const std::vector<StabilizerSite>& init) {
  std::string why;
  if (!stabilizer_dimension_supported(N, why)) throw InvalidInput("stabilizer: " + why);
  c.validate();
  if (static_cast<i64>(init.size()) != c.L)
    throw InvalidInput("stabilizer: " + std::to_string(init.size()) +
                                " initial site states for L = " + std::to_string(c.L));
  for (std::size_t i = 0; i < init.size(); ++i)
    if (!stabilizer_site_valid(N, init[i], why))
      throw InvalidInput("stabilizer: site " + std::to_string(i) + ": " + why);

  const SparseInt S = assemble_period(c);  // exact int64, reduced mod N once below
  Problem P;
  P.L = c.L;
  P.N = static_cast<u64>(N);
  const i64 L = c.L, m = 2 * L;
  std::vector<std::vector<std::pair<i64, u64>>> rows(static_cast<std::size_t>(m));
  for (i64 g = 0; g < m; ++g)
    for (i64 k = S.rowptr[g]; k < S.rowptr[g + 1]; ++k) {
      const u64 v = mod_reduce(S.val[k], P.N);
      if (v != 0) rows[static_cast<std::size_t>(interleaved(g, L))].push_back({interleaved(S.col[k], L), v});
    }
  P.rowptr.assign(1, 0);
  for (i64 i = 0; i < m; ++i) {
    for (const auto& [j, v] : rows[static_cast<std::size_t>(i)]) {
      P.col.push_back(j);
      P.val.push_back(v);
      P.D = std::max(P.D, std::abs(cyclic_offset(i, j, m)));
    }
    P.rowptr.push_back(static_cast<i64>(P.col.size()));
  }
  for (const auto& s : init) {
    switch (s.kind) {
      case LocalState::Position: P.a.push_back(0); P.b.push_back(1 % P.N); break;
      case LocalState::Momentum: P.a.push_back(1 % P.N); P.b.push_back(0); break;
      case LocalState::Line: P.a.push_back(mod_reduce(s.a, P.N)); P.b.push_back(mod_reduce(s.b, P.N)); break;
    }
  }
  return P;
}

[[noreturn]] void internal_error(const std::string& what) {
  throw std::logic_error("stabilizer (internal): " + what);
}

// ---------------------------------------------------------------------------
// Generator rows over F_2, bit-packed in an M4RI matrix (L x 2L), column c =
// bit c % 64 of word c / 64 (M4RI's layout).
struct MzdFree {
  void operator()(mzd_t* A) const { mzd_free(A); }
};
using MzdPtr = std::unique_ptr<mzd_t, MzdFree>;

class Gf2Rows {
 public:
  explicit Gf2Rows(const Problem& P) : n_(P.L), m_(2 * P.L), D_(P.D) {
    if (P.N != 2) internal_error("Gf2Rows needs N = 2");
    G_.reset(mzd_init(static_cast<rci_t>(n_), static_cast<rci_t>(m_)));
    for (i64 i = 0; i < n_; ++i) {
      if (P.a[i] & 1) mzd_write_bit(G_.get(), static_cast<rci_t>(i), static_cast<rci_t>(2 * i), 1);
      if (P.b[i] & 1) mzd_write_bit(G_.get(), static_cast<rci_t>(i), static_cast<rci_t>(2 * i + 1), 1);
    }
    W_ = G_->width;
    // One mask per cyclic offset d: bit c of mask_d is S[c][c - d mod 2L].
    std::map<i64, std::vector<word>> masks;
    for (i64 c = 0; c < m_; ++c)
      for (i64 k = P.rowptr[c]; k < P.rowptr[c + 1]; ++k) {
        if ((P.val[k] & 1) == 0) continue;
        auto& mk = masks[cyclic_offset(c, P.col[k], m_)];
        mk.resize(static_cast<std::size_t>(W_), 0);
        mk[static_cast<std::size_t>(c >> 6)] ^= word(1) << (c & 63);
      }
    for (auto& [d, mk] : masks) {
      off_.push_back(d);
      mask_.push_back(std::move(mk));
    }
    ext_.assign(static_cast<std::size_t>(W_ + ((2 * D_) >> 6) + 3), 0);
    out_.assign(static_cast<std::size_t>(W_), 0);
  }

  i64 n() const { return n_; }
  i64 m() const { return m_; }

  i64 first_nonzero(i64 k, i64 from) const {
    if (from >= m_) return m_;
    const word* r = row(k);
    i64 w = from >> 6;
    word x = r[w] & (~word(0) << (from & 63));
    for (;;) {
      if (x) return (w << 6) + __builtin_ctzll(x);
      if (++w == W_) return m_;
      x = r[w];
    }
  }

  i64 last_nonzero(i64 k, i64 from) const {
    if (from < 0) return -1;
    const word* r = row(k);
    i64 w = from >> 6;
    const int s = static_cast<int>(from & 63);
    word x = r[w] & (s == 63 ? ~word(0) : ((word(1) << (s + 1)) - 1));
    for (;;) {
      if (x) return (w << 6) + 63 - __builtin_clzll(x);
      if (--w < 0) return -1;
      x = r[w];
    }
  }

  // row k -= row o on columns [lo, hi] (row o is zero outside them).
  void cancel(i64 k, i64 o, i64 /*c*/, i64 lo, i64 hi) {
    word* dst = row(k);
    const word* src = row(o);
    for (i64 w = lo >> 6; w <= (hi >> 6); ++w) dst[w] ^= src[w];
  }

  // Every row g -> S g. On entry [lo[k], hi[k]] contains the support of row
  // k; on exit it contains the support of the new row.
  void apply_period(std::vector<i64>& lo, std::vector<i64>& hi) {
    const int s = static_cast<int>(D_ & 63);
    const i64 q0 = D_ >> 6;
    for (i64 k = 0; k < n_; ++k) {
      word* g = row(k);
      // ext = g[m-D..m) ++ g ++ g[0..D): ext bit e holds g bit (e - D) mod m.
      std::fill(ext_.begin(), ext_.end(), 0);
      for (i64 w = 0; w < W_; ++w) {
        ext_[q0 + w] |= g[w] << s;
        if (s) ext_[q0 + w + 1] |= g[w] >> (64 - s);
      }
      for (i64 j = 0; j < D_; ++j) {
        if (bit(g, m_ - D_ + j)) set_bit(ext_.data(), j);
        if (bit(g, j)) set_bit(ext_.data(), D_ + m_ + j);
      }
      i64 wlo = 0, whi = W_ - 1;
      if (lo[k] - D_ >= 0 && hi[k] + D_ <= m_ - 1) {
        lo[k] -= D_;
        hi[k] += D_;
        wlo = lo[k] >> 6;
        whi = hi[k] >> 6;
      } else {
        lo[k] = 0;
        hi[k] = m_ - 1;
      }
      for (i64 w = wlo; w <= whi; ++w) out_[w] = 0;
      for (std::size_t t = 0; t < off_.size(); ++t) {
        // output bit c reads ext bit c - d + D
        const i64 sh = D_ - off_[t];
        const i64 q = sh >> 6;
        const int r = static_cast<int>(sh & 63);
        const word* mk = mask_[t].data();
        const word* e = ext_.data() + q;
        if (r == 0) {
          for (i64 w = wlo; w <= whi; ++w) out_[w] ^= e[w] & mk[w];
        } else {
          for (i64 w = wlo; w <= whi; ++w) out_[w] ^= ((e[w] >> r) | (e[w + 1] << (64 - r))) & mk[w];
        }
      }
      for (i64 w = wlo; w <= whi; ++w) g[w] = out_[w];
    }
  }

  // rank over F_2 of the rows restricted to the (interleaved) columns `cols`.
  i64 region_rank(const std::vector<i64>& cols) const {
    std::vector<word> keep(static_cast<std::size_t>(W_), 0);
    for (i64 c : cols) keep[c >> 6] |= word(1) << (c & 63);
    MzdPtr A(mzd_copy(nullptr, G_.get()));
    for (i64 k = 0; k < n_; ++k) {
      word* r = mzd_row(A.get(), static_cast<rci_t>(k));
      for (i64 w = 0; w < W_; ++w) r[w] &= keep[w];
    }
    return mzd_echelonize(A.get(), 0);
  }

  // Pivot columns of a row echelon form of all rows (M4RI).
  std::vector<i64> echelon_pivots() const {
    MzdPtr A(mzd_copy(nullptr, G_.get()));
    const rci_t r = mzd_echelonize(A.get(), 0);
    std::vector<i64> piv;
    for (rci_t i = 0; i < r; ++i) {
      const word* x = mzd_row(A.get(), i);
      i64 c = 0;
      while (c < m_ && !((x[c >> 6] >> (c & 63)) & 1)) ++c;
      piv.push_back(c);
    }
    return piv;
  }

 private:
  word* row(i64 k) const { return mzd_row(G_.get(), static_cast<rci_t>(k)); }
  static bool bit(const word* x, i64 c) { return (x[c >> 6] >> (c & 63)) & 1; }
  static void set_bit(word* x, i64 c) { x[c >> 6] |= word(1) << (c & 63); }

  i64 n_, m_, D_, W_ = 0;
  MzdPtr G_;
  std::vector<i64> off_;
  std::vector<std::vector<word>> mask_;
  std::vector<word> ext_, out_;
};

// ---------------------------------------------------------------------------
// Generator rows mod N in a FLINT nmod_mat (L x 2L). `cancel`, ranks and
// echelon forms need N prime; apply_period and Howell forms work for any N.
class NmodRows {
 public:
  explicit NmodRows(const Problem& P)
      : n_(P.L), m_(2 * P.L), D_(P.D), rowptr_(P.rowptr), col_(P.col), val_(P.val) {
    nmod_init(&mod_, P.N);
    nmod_mat_init(G_, n_, m_, P.N);
    for (i64 i = 0; i < n_; ++i) {
      nmod_mat_entry(G_, i, 2 * i) = P.a[i];
      nmod_mat_entry(G_, i, 2 * i + 1) = P.b[i];
    }
    out_.assign(static_cast<std::size_t>(m_), 0);
    // Accumulate a row of S g without intermediate reductions when
    // (nnz per row) * (N - 1)^2 fits in 64 bits.
    i64 nnz = 1;
    for (i64 c = 0; c < m_; ++c) nnz = std::max(nnz, rowptr_[c + 1] - rowptr_[c]);
    const unsigned __int128 bound = static_cast<unsigned __int128>(nnz) * (P.N - 1) * (P.N - 1);
    lazy_ = bound < (static_cast<unsigned __int128>(1) << 64);
  }
  ~NmodRows() { nmod_mat_clear(G_); }
  NmodRows(const NmodRows&) = delete;
  NmodRows& operator=(const NmodRows&) = delete;

  i64 n() const { return n_; }
  i64 m() const { return m_; }
  u64 modulus() const { return mod_.n; }
  const nmod_mat_struct* mat() const { return G_; }

  i64 first_nonzero(i64 k, i64 from) const {
    const mp_limb_t* r = G_->rows[k];
    for (i64 c = std::max<i64>(from, 0); c < m_; ++c)
      if (r[c]) return c;
    return m_;
  }
  i64 last_nonzero(i64 k, i64 from) const {
    const mp_limb_t* r = G_->rows[k];
    for (i64 c = std::min(from, m_ - 1); c >= 0; --c)
      if (r[c]) return c;
    return -1;
  }

  // row k -= (row_k[c] / row_o[c]) row o on columns [lo, hi]; N prime.
  void cancel(i64 k, i64 o, i64 c, i64 lo, i64 hi) {
    mp_limb_t* dst = G_->rows[k];
    const mp_limb_t* src = G_->rows[o];
    const mp_limb_t f = nmod_neg(nmod_mul(dst[c], n_invmod(src[c], mod_.n), mod_), mod_);
    _nmod_vec_scalar_addmul_nmod(dst + lo, src + lo, hi - lo + 1, f, mod_);
  }

  void apply_period(std::vector<i64>& lo, std::vector<i64>& hi) {
    for (i64 k = 0; k < n_; ++k) {
      mp_limb_t* g = G_->rows[k];
      i64 c0 = 0, c1 = m_ - 1;
      if (lo[k] - D_ >= 0 && hi[k] + D_ <= m_ - 1) {
        c0 = lo[k] - D_;
        c1 = hi[k] + D_;
      }
      lo[k] = c0;
      hi[k] = c1;
      if (lazy_) {
        for (i64 c = c0; c <= c1; ++c) {
          mp_limb_t acc = 0;
          for (i64 e = rowptr_[c]; e < rowptr_[c + 1]; ++e) acc += val_[e] * g[col_[e]];
          out_[c] = acc % mod_.n;
        }
      } else {
        for (i64 c = c0; c <= c1; ++c) {
          mp_limb_t acc = 0;
          for (i64 e = rowptr_[c]; e < rowptr_[c + 1]; ++e)
            acc = nmod_add(acc, nmod_mul(val_[e], g[col_[e]], mod_), mod_);
          out_[c] = acc;
        }
      }
      for (i64 c = c0; c <= c1; ++c) g[c] = out_[c];
    }
  }

  // rank over F_N (N prime) of the rows restricted to the columns `cols`.
  i64 region_rank(const std::vector<i64>& cols) const {
    const i64 w = static_cast<i64>(cols.size());
    if (w == 0) return 0;
    nmod_mat_t B;
    nmod_mat_init(B, n_, w, mod_.n);
    for (i64 k = 0; k < n_; ++k)
      for (i64 j = 0; j < w; ++j) nmod_mat_entry(B, k, j) = nmod_mat_entry(G_, k, cols[j]);
    const i64 r = nmod_mat_rank(B);
    nmod_mat_clear(B);
    return r;
  }

  // Pivot columns of the reduced row echelon form (FLINT, N prime).
  std::vector<i64> echelon_pivots() const {
    nmod_mat_t A;
    nmod_mat_init_set(A, G_);
    const i64 r = nmod_mat_rref(A);
    std::vector<i64> piv;
    for (i64 i = 0; i < r; ++i) {
      i64 c = 0;
      while (c < m_ && nmod_mat_entry(A, i, c) == 0) ++c;
      piv.push_back(c);
    }
    nmod_mat_clear(A);
    return piv;
  }

 private:
  i64 n_, m_, D_;
  std::vector<i64> rowptr_, col_;
  std::vector<u64> val_;
  nmod_t mod_;
  nmod_mat_t G_;
  std::vector<mp_limb_t> out_;
  bool lazy_ = false;
};

// ---------------------------------------------------------------------------
// Clipped gauge (Nahum, Ruhman, Vijay & Haah 2017) kept incrementally: after
// each period a left pass makes the left endpoints distinct (processing
// columns left to right, cancelling the leading entry against the shortest
// row that owns the column), then a right pass makes the right endpoints
// distinct without moving a left endpoint (a row is only reduced by a row
// whose left endpoint lies further right).
template <class Rows>
class Gauge {
 public:
  explicit Gauge(Rows& R)
      : R_(R), n_(R.n()), m_(R.m()), lead_(n_), trail_(n_), lo_(n_, 0), hi_(n_, m_ - 1), head_(m_, -1),
        next_(n_, -1) {}

  void advance() { R_.apply_period(lo_, hi_); }

  void regauge() {
    for (i64 k = 0; k < n_; ++k) {
      lead_[k] = R_.first_nonzero(k, lo_[k]);
      if (lead_[k] >= m_) internal_error("a generator vanished (S not invertible mod N?)");
      trail_[k] = R_.last_nonzero(k, hi_[k]);
    }
    left_pass();
    right_pass();
    lo_ = lead_;
    hi_ = trail_;
  }

  // S([0, x)) / ln p for x = 0..L, with the purity check.
  std::vector<i64> profile_units() const {
    std::vector<i64> nl(static_cast<std::size_t>(m_ + 1), 0), nr(static_cast<std::size_t>(m_ + 1), 0);
    for (i64 k = 0; k < n_; ++k) {
      ++nl[lead_[k] + 1];
      ++nr[trail_[k] + 1];
    }
    for (i64 c = 1; c <= m_; ++c) {
      nl[c] += nl[c - 1];
      nr[c] += nr[c - 1];
    }
    const i64 L = m_ / 2;
    std::vector<i64> s(static_cast<std::size_t>(L + 1));
    for (i64 x = 0; x <= L; ++x) {
      const i64 left = nl[2 * x], right = nr[2 * x];
      if (left + right != 2 * x || left - x < 0)
        internal_error("clipped-gauge endpoint count fails at x = " + std::to_string(x));
      s[x] = left - x;  // = (left - right) / 2, half the generators straddling the cut
    }
    return s;
  }

 private:
  void push(i64 k, i64 c) {
    next_[k] = head_[c];
    head_[c] = k;
  }
  void take(i64 c) {
    bucket_.clear();
    for (i64 k = head_[c]; k != -1; k = next_[k]) bucket_.push_back(k);
    head_[c] = -1;
  }

  void left_pass() {
    for (i64 k = 0; k < n_; ++k) push(k, lead_[k]);
    for (i64 c = 0; c < m_; ++c) {
      if (head_[c] == -1) continue;
      take(c);
      if (bucket_.size() == 1) continue;
      i64 o = bucket_[0];
      for (i64 k : bucket_)
        if (trail_[k] < trail_[o]) o = k;
      for (i64 k : bucket_) {
        if (k == o) continue;
        const i64 tk = trail_[k], to = trail_[o];
        R_.cancel(k, o, c, c, std::max(tk, to));
        lead_[k] = R_.first_nonzero(k, c + 1);
        if (lead_[k] >= m_) internal_error("generators became dependent");
        trail_[k] = tk != to ? std::max(tk, to) : R_.last_nonzero(k, tk);
        push(k, lead_[k]);
      }
    }
  }

  void right_pass() {
    for (i64 k = 0; k < n_; ++k) push(k, trail_[k]);
    for (i64 c = m_ - 1; c >= 0; --c) {
      if (head_[c] == -1) continue;
      take(c);
      if (bucket_.size() == 1) continue;
      i64 o = bucket_[0];
      for (i64 k : bucket_)
        if (lead_[k] > lead_[o]) o = k;
      for (i64 k : bucket_) {
        if (k == o) continue;
        R_.cancel(k, o, c, lead_[o], c);
        trail_[k] = R_.last_nonzero(k, c - 1);
        if (trail_[k] < lead_[k]) internal_error("right pass moved a left endpoint");
        push(k, trail_[k]);
      }
    }
  }

  Rows& R_;
  i64 n_, m_;
  std::vector<i64> lead_, trail_, lo_, hi_, head_, next_, bucket_;
};

std::vector<i64> units_from_pivots(const std::vector<i64>& piv, i64 L) {
  if (static_cast<i64>(piv.size()) != L) internal_error("generators are not independent");
  std::vector<i64> cnt(static_cast<std::size_t>(2 * L + 1), 0);
  for (i64 c : piv) ++cnt[c + 1];
  for (i64 c = 1; c <= 2 * L; ++c) cnt[c] += cnt[c - 1];
  std::vector<i64> s(static_cast<std::size_t>(L + 1));
  for (i64 x = 0; x <= L; ++x) {
    s[x] = cnt[2 * x] - x;
    if (s[x] < 0) internal_error("rank below |A|: module not Lagrangian");
  }
  return s;
}

// Advances R one period at a time with every row's full column range
// (no gauge bookkeeping); at(t) is called for t = 0..T.
template <class Rows, class At>
void full_periods(Rows& R, i64 T, At at) {
  std::vector<i64> lo(R.n()), hi(R.n());
  for (i64 t = 0; t <= T; ++t) {
    if (t > 0) {
      std::fill(lo.begin(), lo.end(), 0);
      std::fill(hi.begin(), hi.end(), R.m() - 1);
      R.apply_period(lo, hi);
    }
    at(t);
  }
}

template <class Rows>
std::vector<std::vector<i64>> prime_profile(Rows& R, i64 T, i64 stride, bool echelon) {
  std::vector<std::vector<i64>> out;
  if (echelon) {
    full_periods(R, T, [&](i64 t) {
      if (t % stride == 0) out.push_back(units_from_pivots(R.echelon_pivots(), R.n()));
    });
    return out;
  }
  Gauge<Rows> g(R);
  for (i64 t = 0; t <= T; ++t) {
    if (t > 0) g.advance();
    g.regauge();
    if (t % stride == 0) out.push_back(g.profile_units());
  }
  return out;
}

template <class Rows>
std::vector<i64> prime_curve(Rows& R, const std::vector<i64>& cols, i64 T) {
  const i64 A = static_cast<i64>(cols.size()) / 2;
  std::vector<i64> out;
  full_periods(R, T, [&](i64) {
    const i64 r = R.region_rank(cols);
    if (r < A || r > std::min(R.n(), 2 * A)) internal_error("rank out of range: module not Lagrangian");
    out.push_back(r - A);
  });
  return out;
}

// S of the prefix [0, ell) at t = 0..T through the incremental gauge.
template <class Rows>
std::vector<i64> prime_prefix_curve(Rows& R, i64 ell, i64 T) {
  Gauge<Rows> g(R);
  std::vector<i64> out;
  for (i64 t = 0; t <= T; ++t) {
    if (t > 0) g.advance();
    g.regauge();
    out.push_back(g.profile_units()[ell]);
  }
  return out;
}

// Howell form (FLINT) of the rows of `src` restricted to the columns `cols`,
// in that order: (pivot column, pivot value h | N) of each nonzero row.
std::vector<std::pair<i64, u64>> howell_pivots(const nmod_mat_struct* src, const std::vector<i64>& cols) {
  const i64 n = src->r, w = static_cast<i64>(cols.size());
  std::vector<std::pair<i64, u64>> piv;
  if (w == 0) return piv;
  nmod_mat_t B;
  nmod_mat_init(B, std::max(n, w), w, src->mod.n);  // FLINT needs rows >= columns
  for (i64 k = 0; k < n; ++k)
    for (i64 j = 0; j < w; ++j) nmod_mat_entry(B, k, j) = nmod_mat_entry(src, k, cols[j]);
  const i64 r = nmod_mat_howell_form(B);
  for (i64 i = 0; i < r; ++i) {
    i64 j = 0;
    while (j < w && nmod_mat_entry(B, i, j) == 0) ++j;
    if (j == w) continue;
    piv.push_back({j, nmod_mat_entry(B, i, j)});
  }
  nmod_mat_clear(B);
  return piv;
}

// Exponent of p in x.
int valuation(u64 x, u64 p) {
  int v = 0;
  while (x % p == 0) {
    x /= p;
    ++v;
  }
  return v;
}

// Entropies from Howell pivots are kept exact as integers: for each prime
// p^e || N, the exponent of p in a module size (prod N / h), times ln p.
std::vector<double> howell_profile_nats(const NmodRows& R, const std::vector<PrimePower>& fac) {
  const i64 L = R.n(), m = R.m();
  const u64 N = R.modulus();
  std::vector<i64> all(static_cast<std::size_t>(m));
  std::iota(all.begin(), all.end(), 0);
  const auto piv = howell_pivots(R.mat(), all);
  std::vector<double> s(static_cast<std::size_t>(L + 1), 0.0);
  for (const auto& [p, e] : fac) {
    // tail[c] = exponent of p in |span of the rows with pivot >= c|; the rows
    // with pivot >= 2x span V restricted to [x, L) (Howell property), and
    // S([0, x)) = S([x, L)) = (L - x) ln N - ln |V restricted to [x, L)|.
    std::vector<i64> tail(static_cast<std::size_t>(m + 1), 0);
    for (const auto& [j, h] : piv) tail[j] += valuation(N / h, p);
    for (i64 c = m - 1; c >= 0; --c) tail[c] += tail[c + 1];
    if (tail[0] != static_cast<i64>(e) * L) internal_error("|V| != N^L: module not Lagrangian");
    const double lnp = std::log(static_cast<double>(p));
    for (i64 x = 0; x <= L; ++x) {
      const i64 u = (L - x) * e - tail[2 * x];
      if (u < 0) internal_error("negative entropy from a Howell form");
      s[x] += static_cast<double>(u) * lnp;
    }
  }
  return s;
}

double howell_region_nats(const NmodRows& R, const std::vector<i64>& cols, const std::vector<PrimePower>& fac) {
  const u64 N = R.modulus();
  const auto piv = howell_pivots(R.mat(), cols);
  const i64 A = static_cast<i64>(cols.size()) / 2;
  double s = 0.0;
  for (const auto& [p, e] : fac) {
    i64 v = 0;  // exponent of p in |P_A V|
    for (const auto& ph : piv) v += valuation(N / ph.second, p);
    const i64 u = v - A * e;
    if (u < 0 || u > A * e) internal_error("|P_A V| out of range: module not Lagrangian");
    s += static_cast<double>(u) * std::log(static_cast<double>(p));
  }
  return s;
}

bool squarefree(const std::vector<PrimePower>& f) {
  return std::all_of(f.begin(), f.end(), [](const PrimePower& x) { return x.e == 1; });
}

std::vector<i64> region_columns(const std::vector<std::int64_t>& region, i64 L) {
  std::vector<char> seen(static_cast<std::size_t>(L), 0);
  std::vector<i64> sites;
  for (i64 s : region) {
    if (s < 0 || s >= L)
      throw InvalidInput("stabilizer: region site " + std::to_string(s) + " is outside [0, " +
                                  std::to_string(L) + ")");
    if (seen[s]) throw InvalidInput("stabilizer: region site " + std::to_string(s) + " appears twice");
    seen[s] = 1;
    sites.push_back(s);
  }
  std::sort(sites.begin(), sites.end());
  std::vector<i64> cols;
  for (i64 s : sites) {
    cols.push_back(2 * s);
    cols.push_back(2 * s + 1);
  }
  return cols;
}

// For a region that is one arc {a, a+1, ..., a+ell-1} mod L with
// 0 < ell < L: its start a; otherwise -1.
i64 arc_start(const std::vector<i64>& cols, i64 L) {
  const i64 ell = static_cast<i64>(cols.size()) / 2;
  if (ell == 0 || ell == L) return -1;
  std::vector<char> in(static_cast<std::size_t>(L), 0);
  for (std::size_t k = 0; k < cols.size(); k += 2) in[cols[k] / 2] = 1;
  i64 start = -1, starts = 0;
  for (i64 s = 0; s < L; ++s)
    if (in[s] && !in[(s + L - 1) % L]) {
      start = s;
      ++starts;
    }
  return starts == 1 ? start : -1;
}

}  // namespace

bool stabilizer_dimension_supported(std::int64_t N, std::string& why) {
  if (N < 2) {
    why = "N = " + std::to_string(N) + " is not a local dimension; supported: every N >= 2";
    return false;
  }
  const auto f = factorize(static_cast<u64>(N));
  const std::string n = "N = " + std::to_string(N);
  if (f.size() == 1 && f[0].e == 1)
    why = n + " is prime: ranks over F_N" + std::string(N == 2 ? " (M4RI)" : " (FLINT nmod)") +
          ", incremental clipped gauge for profiles";
  else if (squarefree(f))
    why = n + " = " + factor_string(f) + " is square-free: Chinese remainder theorem over its primes";
  else
    why = n + " = " + factor_string(f) + " is not square-free: Howell forms over Z_N (FLINT)";
  return true;
}

bool stabilizer_site_valid(std::int64_t N, const StabilizerSite& s, std::string& why) {
  if (N < 2) {
    why = "N = " + std::to_string(N) + " is not a local dimension";
    return false;
  }
  switch (s.kind) {
    case LocalState::Position:
    case LocalState::Momentum:
      return true;
    case LocalState::Line: {
      const u64 n = static_cast<u64>(N), a = mod_reduce(s.a, n), b = mod_reduce(s.b, n);
      const u64 g = std::gcd(std::gcd(a, b), n);
      if (g == 1) return true;
      why = "line (" + std::to_string(s.a) + ", " + std::to_string(s.b) + ") mod " + std::to_string(N) + " = (" +
            std::to_string(a) + ", " + std::to_string(b) + ") has gcd(a, b, N) = " + std::to_string(g) +
            " and spans only " + std::to_string(n / g) + " of the N = " + std::to_string(N) +
            " elements of a Lagrangian line; needs gcd(a, b, N) = 1";
      return false;
    }
  }
  why = "unknown local state kind " + std::to_string(static_cast<int>(s.kind));
  return false;
}

namespace {

bool use_howell(StabilizerMethod method, const std::vector<PrimePower>& fac) {
  return method == StabilizerMethod::Howell || (method == StabilizerMethod::Auto && !squarefree(fac));
}

void require_squarefree(std::int64_t N, const std::vector<PrimePower>& fac) {
  if (!squarefree(fac))
    throw InvalidInput("stabilizer: method Echelon needs square-free N; N = " + std::to_string(N) +
                                " = " + factor_string(fac));
}

// f(rows) for the rows of Pp mod the prime p: bit-packed for p = 2.
template <class F>
auto with_prime_rows(const Problem& Pp, i64 p, F f) {
  if (p == 2) {
    Gf2Rows R(Pp);
    return f(R);
  }
  NmodRows R(Pp);
  return f(R);
}

}  // namespace

std::vector<double> stabilizer_entropy_curve(const Circuit& c, std::int64_t N,
                                             const std::vector<StabilizerSite>& init,
                                             const std::vector<std::int64_t>& region, std::int64_t T,
                                             StabilizerMethod method) {
  const Problem P = prepare(c, N, init);
  if (T < 0) throw InvalidInput("stabilizer: T = " + std::to_string(T) + " < 0");
  const std::vector<i64> cols = region_columns(region, c.L);
  const auto fac = factorize(P.N);
  std::vector<double> out(static_cast<std::size_t>(T + 1), 0.0);
  if (use_howell(method, fac)) {
    NmodRows R(P);  // the Howell path (any N): the full rows mod N
    full_periods(R, T, [&](i64 t) { out[t] = howell_region_nats(R, cols, fac); });
    return out;
  }
  require_squarefree(N, fac);
  // Auto: an arc becomes a prefix after rotating the sites, and its entropy
  // comes from the incremental gauge; any other region (and Echelon) from
  // ranks of the projected generators.
  const i64 a0 = method == StabilizerMethod::Auto ? arc_start(cols, c.L) : -1;
  const i64 ell = static_cast<i64>(cols.size()) / 2;
  for (const auto& [p, e] : fac) {
    const Problem Pp = reduce_to(a0 >= 0 ? rotate(P, a0) : P, p);
    const std::vector<i64> u = with_prime_rows(
        Pp, p, [&](auto& R) { return a0 >= 0 ? prime_prefix_curve(R, ell, T) : prime_curve(R, cols, T); });
    const double lnp = std::log(static_cast<double>(p));
    for (i64 t = 0; t <= T; ++t) out[t] += static_cast<double>(u[t]) * lnp;
  }
  return out;
}

std::vector<std::vector<double>> stabilizer_profile(const Circuit& c, std::int64_t N,
                                                    const std::vector<StabilizerSite>& init, std::int64_t T,
                                                    std::int64_t stride, StabilizerMethod method) {
  const Problem P = prepare(c, N, init);
  if (T < 0) throw InvalidInput("stabilizer: T = " + std::to_string(T) + " < 0");
  if (stride < 1) throw InvalidInput("stabilizer: stride = " + std::to_string(stride) + " < 1");
  const auto fac = factorize(P.N);
  const i64 rows = T / stride + 1, L = c.L;
  std::vector<std::vector<double>> out(static_cast<std::size_t>(rows),
                                       std::vector<double>(static_cast<std::size_t>(L + 1), 0.0));
  if (use_howell(method, fac)) {
    NmodRows R(P);  // the Howell path (any N): the full rows mod N
    full_periods(R, T, [&](i64 t) {
      if (t % stride == 0) out[t / stride] = howell_profile_nats(R, fac);
    });
    return out;
  }
  require_squarefree(N, fac);
  const bool echelon = method == StabilizerMethod::Echelon;
  for (const auto& [p, e] : fac) {
    const Problem Pp = reduce_to(P, p);
    const std::vector<std::vector<i64>> u =
        with_prime_rows(Pp, p, [&](auto& R) { return prime_profile(R, T, stride, echelon); });
    const double lnp = std::log(static_cast<double>(p));
    for (i64 k = 0; k < rows; ++k)
      for (i64 x = 0; x <= L; ++x) out[k][x] += static_cast<double>(u[k][x]) * lnp;
  }
  return out;
}

double stabilizer_work_bytes(std::int64_t N, std::int64_t L, bool profile) {
  // The generator rows, L x 2L: Gf2Rows bit-packs them for p = 2, NmodRows
  // keeps one word (mp_limb_t) per entry; a square-free N runs its primes one
  // after another, so one set of rows is alive at a time. The profile's
  // echelon form is a second copy; the Howell path (N not square-free) forms
  // up to max(L, 2L) x 2L words per cut (howell_pivots).
  if (N < 2) throw InvalidInput("stabilizer_work_bytes: N = " + std::to_string(N) + " < 2");
  const auto fac = factorize(static_cast<u64>(N));
  const double l = static_cast<double>(L);
  const double word_rows = l * 2 * l * static_cast<double>(sizeof(mp_limb_t));
  if (use_howell(StabilizerMethod::Auto, fac)) return word_rows + 2 * l * 2 * l * sizeof(mp_limb_t) + 64.0 * l;
  const bool only_two = fac.size() == 1 && fac[0].p == 2;
  const double rows = only_two ? l * 2 * l / 8 : word_rows;
  return rows * (profile ? 2 : 1) + 64.0 * l;
}

}  // namespace toral

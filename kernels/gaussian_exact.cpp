#include "gaussian_exact.hpp"
#include "errors.hpp"

#include "flint_raii.hpp"
#include "multimod.hpp"
#include "real_roots.hpp"

#include <acb.h>
#include <arb.h>
#include <arb_fmpz_poly.h>
#include <flint/fmpz.h>
#include <flint/fmpz_mat.h>
#include <flint/fmpz_poly.h>
#include <flint/fmpz_poly_factor.h>
#include <flint/fmpz_vec.h>
#include <flint/nmod_mat.h>
#include <flint/nmod_poly.h>
#include <flint/nmod_vec.h>
#include <flint/ulong_extras.h>

#include <algorithm>
#include <cstdint>
#include <memory>
#include <cmath>
#include <numeric>
#include <stdexcept>
#include <string>
#include <utility>

namespace toral {

namespace {

// The shared FLINT / arb holders (flint_raii.hpp) under the names used here.
using Fmpz = flint::Int;
using FmpzMat = flint::Mat;
using FmpzPoly = flint::Poly;
using PolyFactor = flint::PolyFactors;
using Arb = flint::Ball;
using Arf = flint::Float;
using AcbVec = flint::CVec;

// FLINT's inline fmpz_neg / fmpz_set_si call GMP directly, and the build
// links FLINT and arb but not GMP itself: use FLINT's exported functions.
void neg(fmpz_t r, const fmpz_t x) { fmpz_mul_si(r, x, -1); }
void set_si(fmpz_t r, slong v) {
  fmpz_one(r);
  fmpz_mul_si(r, r, v);
}

// Plain validated data for one run.
struct Problem {
  std::int64_t L = 0;
  std::int64_t k = 0;              // |A|
  std::vector<std::int64_t> rows;  // global rows of P_A: q's of A, then p's of A
  // sigma0 = diag(D) / (2 Den) with D integers (q columns 0..L-1, then p's).
  std::vector<Fmpz> D;
  Fmpz den;
  bool unit_D = true;  // every D_c == 1 (all vacuum)
};

void build_sigma0(Problem& pr, const std::vector<GaussianSite>& init) {
  const std::int64_t L = pr.L;
  // Reduced s = n/d per squeezed site; Den = lcm of every n and d.
  std::vector<std::pair<std::int64_t, std::int64_t>> s(static_cast<std::size_t>(L), {1, 1});
  fmpz_one(pr.den.get());
  Fmpz tmp;
  for (std::int64_t i = 0; i < L; ++i) {
    const GaussianSite& g = init[static_cast<std::size_t>(i)];
    if (!g.squeezed) continue;
    if (g.den == 0)
      throw InvalidInput("gaussian_entropy_curve: site " + std::to_string(i) +
                                  ": squeezing s = " + std::to_string(g.num) + "/0 has a zero denominator");
    if ((g.num > 0) != (g.den > 0) || g.num == 0)
      throw InvalidInput("gaussian_entropy_curve: site " + std::to_string(i) + ": squeezing s = " +
                                  std::to_string(g.num) + "/" + std::to_string(g.den) + " must be > 0");
    if (g.num == INT64_MIN || g.den == INT64_MIN)
      throw InvalidInput("gaussian_entropy_curve: site " + std::to_string(i) +
                                  ": squeezing numerator/denominator out of range");
    std::int64_t n = g.num < 0 ? -g.num : g.num, d = g.den < 0 ? -g.den : g.den;
    const std::int64_t gg = std::gcd(n, d);
    n /= gg;
    d /= gg;
    s[static_cast<std::size_t>(i)] = {n, d};
    set_si(tmp.get(), n);
    fmpz_lcm(pr.den.get(), pr.den.get(), tmp.get());
    set_si(tmp.get(), d);
    fmpz_lcm(pr.den.get(), pr.den.get(), tmp.get());
  }
  pr.D = std::vector<Fmpz>(static_cast<std::size_t>(2 * L));
  for (std::int64_t i = 0; i < L; ++i) {
    const auto [n, d] = s[static_cast<std::size_t>(i)];
    // q: Den * n / d, p: Den * d / n (exact: n and d divide Den).
    fmpz_mul_si(pr.D[static_cast<std::size_t>(i)].get(), pr.den.get(), n);
    fmpz_divexact_si(pr.D[static_cast<std::size_t>(i)].get(), pr.D[static_cast<std::size_t>(i)].get(), d);
    fmpz_mul_si(pr.D[static_cast<std::size_t>(L + i)].get(), pr.den.get(), d);
    fmpz_divexact_si(pr.D[static_cast<std::size_t>(L + i)].get(), pr.D[static_cast<std::size_t>(L + i)].get(), n);
  }
  pr.unit_D = true;
  for (const Fmpz& x : pr.D)
    if (!fmpz_is_one(x.get())) pr.unit_D = false;
}

// The light-cone-restricted rows R = P_A S^t: columns `support` (sorted
// global indices) of the 2k x 2L matrix, stored as a 2k x |support| fmpz_mat.
// R_t = P_A S^t on the light cone, exactly (fmpz), and (while they fit in
// `residue_budget` bytes) its residues modulo enough 28-bit primes to
// reconstruct G = R diag(D) R^T = 2 Den sigma_A, updated alongside R_t: G is
// then formed multi-modularly (multimod.hpp lanes, then CRT), several times
// faster than the big-integer dot products, which remain the path past the
// budget (very wide light cones). Both give the same exact G.
class LightCone {
 public:
  LightCone(const Problem& pr, const SparseInt& S, std::int64_t residue_budget)
      : pr_(pr),
        S_(S),
        budget_(residue_budget),
        where_(static_cast<std::size_t>(2 * pr.L), -1),
        mark_(static_cast<std::size_t>(2 * pr.L), 0) {
    support_ = pr.rows;
    std::sort(support_.begin(), support_.end());
    R_ = std::make_unique<FmpzMat>(2 * pr.k, static_cast<slong>(support_.size()));
    for (std::int64_t r = 0; r < 2 * pr.k; ++r) {
      const auto it =
          std::lower_bound(support_.begin(), support_.end(), pr.rows[static_cast<std::size_t>(r)]);
      fmpz_one(fmpz_mat_entry(R_->get(), r, it - support_.begin()));
    }
    // Distinct values of S (coefficients of the residue update) and of D.
    svals_.assign(S.val.begin(), S.val.end());
    std::sort(svals_.begin(), svals_.end());
    svals_.erase(std::unique(svals_.begin(), svals_.end()), svals_.end());
    sidx_.resize(S.val.size());
    for (std::size_t e = 0; e < S.val.size(); ++e)
      sidx_[e] = static_cast<std::int32_t>(std::lower_bound(svals_.begin(), svals_.end(), S.val[e]) - svals_.begin());
    if (!pr.unit_D) {
      d_index_.resize(pr.D.size());
      for (std::size_t c = 0; c < pr.D.size(); ++c) {
        std::size_t i = 0;
        while (i < dvals_.size() && !fmpz_equal(dvals_[i], pr.D[c].get())) ++i;
        if (i == dvals_.size()) dvals_.push_back(pr.D[c].get());
        d_index_[c] = static_cast<std::int32_t>(i);
      }
      for (const fmpz* d : dvals_) dbits_ = std::max<slong>(dbits_, static_cast<slong>(fmpz_bits(d)));
    }
  }

  // R <- R S, on the columns that can be non-zero; columns that come out
  // exactly zero are dropped.
  void step() {
    const std::int64_t n2 = 2 * pr_.L;
    std::vector<std::int64_t> next;
    for (std::int64_t g : support_)
      for (std::int64_t e = S_.rowptr[g]; e < S_.rowptr[g + 1]; ++e) mark_[S_.col[e]] = 1;
    for (std::int64_t j = 0; j < n2; ++j)
      if (mark_[j]) {
        where_[j] = static_cast<std::int64_t>(next.size());
        next.push_back(j);
        mark_[j] = 0;
      }
    const slong rows = 2 * pr_.k;
    auto Rn = std::make_unique<FmpzMat>(rows, static_cast<slong>(next.size()));
    // Contributions (new column, old column, index of the value) by new column.
    std::vector<std::int64_t> count(next.size() + 1, 0);
    for (std::size_t ci = 0; ci < support_.size(); ++ci) {
      const std::int64_t g = support_[ci];
      for (std::int64_t e = S_.rowptr[g]; e < S_.rowptr[g + 1]; ++e) {
        const std::int64_t jj = where_[S_.col[e]];
        ++count[static_cast<std::size_t>(jj) + 1];
        const slong v = static_cast<slong>(S_.val[e]);
        for (slong r = 0; r < rows; ++r)
          fmpz_addmul_si(fmpz_mat_entry(Rn->get(), r, jj), fmpz_mat_entry(R_->get(), r, static_cast<slong>(ci)), v);
      }
    }
    std::vector<std::int64_t> src, fill;
    std::vector<std::int32_t> coef;
    if (nres_ > 0) {
      for (std::size_t j = 0; j < next.size(); ++j) count[j + 1] += count[j];
      src.resize(static_cast<std::size_t>(count.back()));
      coef.resize(src.size());
      fill.assign(count.begin(), count.end() - 1);
      for (std::size_t ci = 0; ci < support_.size(); ++ci) {
        const std::int64_t g = support_[ci];
        for (std::int64_t e = S_.rowptr[g]; e < S_.rowptr[g + 1]; ++e) {
          const std::size_t at = static_cast<std::size_t>(fill[static_cast<std::size_t>(where_[S_.col[e]])]++);
          src[at] = static_cast<std::int64_t>(ci);
          coef[at] = sidx_[static_cast<std::size_t>(e)];
        }
      }
    }
    for (std::int64_t j : next) where_[j] = -1;
    // Drop exactly-zero columns (cancellations can shrink the support).
    std::vector<std::int64_t> keep;
    keep.reserve(next.size());
    for (std::size_t j = 0; j < next.size(); ++j) {
      bool nz = false;
      for (slong r = 0; r < rows && !nz; ++r) nz = !fmpz_is_zero(fmpz_mat_entry(Rn->get(), r, j));
      if (nz) keep.push_back(static_cast<std::int64_t>(j));
    }
    if (nres_ > 0) {
      // The residues of the kept columns, from the old residues.
      std::vector<std::int64_t> ptr(keep.size() + 1, 0), ksrc;
      std::vector<std::int32_t> kcoef;
      for (std::size_t o = 0; o < keep.size(); ++o) {
        const std::size_t j = static_cast<std::size_t>(keep[o]);
        for (std::int64_t t = count[j]; t < count[j + 1]; ++t) {
          ksrc.push_back(src[static_cast<std::size_t>(t)]);
          kcoef.push_back(coef[static_cast<std::size_t>(t)]);
        }
        ptr[o + 1] = static_cast<std::int64_t>(ksrc.size());
      }
      Rspare_.resize(static_cast<std::size_t>(rows) * keep.size() * nres_);
      multimod::combine(moduli(nres_), static_cast<int>(rows), support_.size(), keep.size(), ptr.data(),
                        ksrc.data(), kcoef.data(), svals_.data(), Rres_.data(), Rspare_.data());
      std::swap(Rres_, Rspare_);
    }
    if (keep.size() != next.size()) {
      auto Rk = std::make_unique<FmpzMat>(rows, static_cast<slong>(keep.size()));
      std::vector<std::int64_t> kept_cols;
      for (std::size_t j = 0; j < keep.size(); ++j) {
        for (slong r = 0; r < rows; ++r)
          fmpz_swap(fmpz_mat_entry(Rk->get(), r, static_cast<slong>(j)), fmpz_mat_entry(Rn->get(), r, keep[j]));
        kept_cols.push_back(next[static_cast<std::size_t>(keep[j])]);
      }
      Rn = std::move(Rk);
      next = std::move(kept_cols);
    }
    support_ = std::move(next);
    R_ = std::move(Rn);
  }

  // G = R diag(D) R^T (2k x 2k, symmetric, exact) = 2 Den sigma_A.
  void gram(fmpz_mat_t G) {
    const slong rows = 2 * pr_.k;
    const std::size_t cols = support_.size();
    if (cols == 0) {
      fmpz_mat_zero(G);
      return;
    }
    // |G_ab| <= sum_c D_c |R_ac| |R_bc| < cols 2^(2 bits(R) + bits(D)): the
    // primes must cover twice that (signed reconstruction).
    const double need_bits = 2.0 * static_cast<double>(bits()) + static_cast<double>(dbits_) +
                             std::log2(static_cast<double>(cols)) + 2.0;
    const std::size_t np =
        multimod::kLanes *
        static_cast<std::size_t>(std::ceil(need_bits / multimod::kPrimeBits / static_cast<double>(multimod::kLanes)));
    if (!exact_only_ && static_cast<double>(rows) * static_cast<double>(cols) *
                                static_cast<double>(std::max(np, nres_)) * 8.0 >
                            static_cast<double>(budget_)) {
      exact_only_ = true;  // residues of R no longer fit: drop them for good
      std::vector<std::uint32_t>().swap(Rres_);
      std::vector<std::uint32_t>().swap(Rspare_);
      nres_ = 0;
    }
    if (exact_only_) {
      gram_dot(G);
      return;
    }
    if (np > nres_) {
      multimod::extend_primes(primes_, np);
      extend_residues(np);
    }
    const std::size_t rr = static_cast<std::size_t>(rows * rows);
    Gres_.resize(rr * nres_);
    multimod::gram(moduli(nres_), static_cast<int>(rows), cols, Rres_.data(), pr_.unit_D ? nullptr : Dres_.data(),
                   dvals_.size(), pr_.unit_D ? nullptr : col_d_index().data(), Gres_.data());
    if (comb_np_ != nres_) {
      comb_.reset();
      comb_ = std::make_unique<flint::Comb>(primes_.data(), static_cast<slong>(nres_));
      comb_np_ = nres_;
    }
    std::vector<mp_limb_t> r(nres_);
    for (slong a = 0; a < rows; ++a)
      for (slong b = a; b < rows; ++b) {
        const std::size_t e = static_cast<std::size_t>(a * rows + b);
        for (std::size_t ip = 0; ip < nres_; ++ip) r[ip] = Gres_[multimod::lane_index(rr, e, ip)];
        fmpz_multi_CRT_ui(fmpz_mat_entry(G, a, b), r.data(), comb_->comb(), comb_->temp(), 1);
        if (b != a) fmpz_set(fmpz_mat_entry(G, b, a), fmpz_mat_entry(G, a, b));
      }
  }

  // The same by big-integer dot products (reference and past the budget).
  void gram_dot(fmpz_mat_t G) const {
    const slong rows = 2 * pr_.k;
    const slong n = static_cast<slong>(support_.size());
    if (n == 0) {
      fmpz_mat_zero(G);
      return;
    }
    FmpzMat RD(rows, n);
    const fmpz_mat_struct* W = R_->get();
    if (!pr_.unit_D) {
      for (slong r = 0; r < rows; ++r)
        for (slong j = 0; j < n; ++j)
          fmpz_mul(fmpz_mat_entry(RD.get(), r, j), fmpz_mat_entry(R_->get(), r, j),
                   pr_.D[static_cast<std::size_t>(support_[static_cast<std::size_t>(j)])].get());
      W = RD.get();
    }
    for (slong a = 0; a < rows; ++a)
      for (slong b = a; b < rows; ++b) {
        _fmpz_vec_dot(fmpz_mat_entry(G, a, b), fmpz_mat_entry(R_->get(), a, 0), fmpz_mat_entry(W, b, 0), n);
        if (b != a) fmpz_set(fmpz_mat_entry(G, b, a), fmpz_mat_entry(G, a, b));
      }
  }

  // G mod p for one word prime p (FLINT arithmetic, independent of the lanes).
  void gram_mod(std::vector<mp_limb_t>& g, mp_limb_t p) const {
    const slong rows = 2 * pr_.k;
    const std::size_t cols = support_.size();
    nmod_t mod;
    nmod_init(&mod, p);
    std::vector<mp_limb_t> r(static_cast<std::size_t>(rows) * cols), w(cols, 1);
    for (slong a = 0; a < rows; ++a)
      for (std::size_t c = 0; c < cols; ++c)
        r[static_cast<std::size_t>(a) * cols + c] = fmpz_fdiv_ui(fmpz_mat_entry(R_->get(), a, static_cast<slong>(c)), p);
    if (!pr_.unit_D)
      for (std::size_t c = 0; c < cols; ++c) w[c] = fmpz_fdiv_ui(pr_.D[static_cast<std::size_t>(support_[c])].get(), p);
    std::vector<mp_limb_t> rw(r);  // rows times the weights
    if (!pr_.unit_D)
      for (slong a = 0; a < rows; ++a)
        for (std::size_t c = 0; c < cols; ++c) {
          mp_limb_t& x = rw[static_cast<std::size_t>(a) * cols + c];
          x = nmod_mul(x, w[c], mod);
        }
    const int nlimbs = _nmod_vec_dot_bound_limbs(static_cast<slong>(cols), mod);
    g.assign(static_cast<std::size_t>(rows * rows), 0);
    for (slong a = 0; a < rows; ++a)
      for (slong b = a; b < rows; ++b)
        g[static_cast<std::size_t>(a * rows + b)] = g[static_cast<std::size_t>(b * rows + a)] =
            _nmod_vec_dot(rw.data() + static_cast<std::size_t>(a) * cols, r.data() + static_cast<std::size_t>(b) * cols,
                          static_cast<slong>(cols), mod, nlimbs);
  }

  // Upper bounds (64-bit balls) of the diagonal entries G_aa.
  void gram_diagonal(std::vector<Arb>& d) const {
    const slong rows = 2 * pr_.k, wp = 64;
    d = std::vector<Arb>(static_cast<std::size_t>(rows));
    Arb x;
    for (slong a = 0; a < rows; ++a)
      for (std::size_t c = 0; c < support_.size(); ++c) {
        arb_set_round_fmpz(x.get(), fmpz_mat_entry(R_->get(), a, static_cast<slong>(c)), wp);
        arb_sqr(x.get(), x.get(), wp);
        if (!pr_.unit_D) arb_mul_fmpz(x.get(), x.get(), pr_.D[static_cast<std::size_t>(support_[c])].get(), wp);
        arb_add(d[static_cast<std::size_t>(a)].get(), d[static_cast<std::size_t>(a)].get(), x.get(), wp);
      }
  }

  std::int64_t bits() const {
    const slong b = fmpz_mat_max_bits(R_->get());
    return b < 0 ? -b : b;
  }
  std::int64_t columns() const { return static_cast<std::int64_t>(support_.size()); }

 private:
  multimod::Moduli moduli(std::size_t np) const {
    multimod::Moduli md;
    md.primes = primes_.data();
    md.np = np;
    return md;
  }

  std::vector<std::int32_t> col_d_index() const {
    std::vector<std::int32_t> idx(support_.size());
    for (std::size_t c = 0; c < support_.size(); ++c) idx[c] = d_index_[static_cast<std::size_t>(support_[c])];
    return idx;
  }

  // Residues of R (and of the distinct D values) for primes [nres_, np):
  // more lane blocks at the end of the lane arrays.
  void extend_residues(std::size_t np) {
    const std::size_t entries = static_cast<std::size_t>(2 * pr_.k) * support_.size();
    Rres_.resize(entries * np);
    Dres_.resize(dvals_.size() * np);
    std::vector<const fmpz*> vals(entries);
    for (std::size_t e = 0; e < entries; ++e) vals[e] = R_->get()->entries + e;  // row-major (r, c)
    const multimod::Moduli md = moduli(np);
    multimod::reduce(md, nres_, np, vals.data(), entries, Rres_.data());
    if (!dvals_.empty()) multimod::reduce(md, nres_, np, dvals_.data(), dvals_.size(), Dres_.data());
    nres_ = np;
  }

  const Problem& pr_;
  const SparseInt& S_;
  std::int64_t budget_;
  std::vector<std::int64_t> support_;
  std::unique_ptr<FmpzMat> R_;
  std::vector<std::int64_t> where_;
  std::vector<char> mark_;
  // Residues.
  std::vector<std::uint64_t> primes_;
  std::vector<std::int64_t> svals_;
  std::vector<std::int32_t> sidx_;
  std::vector<const fmpz*> dvals_;
  std::vector<std::int32_t> d_index_;
  slong dbits_ = 0;  // max bits of a D value
  std::size_t nres_ = 0, comb_np_ = 0;
  bool exact_only_ = false;
  std::vector<std::uint32_t> Rres_, Rspare_, Dres_, Gres_;
  std::unique_ptr<flint::Comb> comb_;
};

// One t: symplectic eigenvalues and entropy from G = 2 Den sigma_A.
struct ModeBall {
  double mid = 0.0, rad = 0.0;
};

struct PointResult {
  double entropy = 0.0, radius = 0.0;
  std::int64_t pure = 0, prec = 0;
  bool met = true;
  std::vector<ModeBall> nu;  // descending, with multiplicity (only if asked)
};

// f(nu) for the mode with z = mu^2 - Den^2 > 0 (mu = 2 Den nu), given
// c4 = 4 Den^2: u = z / c4 = nu^2 - 1/4, nu = sqrt(u + 1/4),
// w = nu - 1/2 = u / (nu + 1/2) (no cancellation), and
//   f = (1 + w) log1p(w) - w log w         for w < 1 (both terms >= 0),
//   f = (1 + w) log1p(1/w) + log w         for w >= 1 (both terms > 0).
// A relative error e of z changes f by at most about e: |z df/dz| <= 1.
void mode_entropy(arb_t f, arb_t nu, const arb_t z, const fmpz_t c4, slong wp) {
  Arb u, w, t1, t2;
  arb_div_fmpz(u.get(), z, c4, wp);
  arb_set_d(t1.get(), 0.25);
  arb_add(nu, u.get(), t1.get(), wp);
  arb_sqrt(nu, nu, wp);
  arb_set_d(t1.get(), 0.5);
  arb_add(t1.get(), nu, t1.get(), wp);
  arb_div(w.get(), u.get(), t1.get(), wp);  // w = nu - 1/2
  if (arf_cmp_si(arb_midref(w.get()), 1) < 0) {
    arb_log1p(t1.get(), w.get(), wp);
    arb_add_ui(t2.get(), w.get(), 1, wp);
    arb_mul(t1.get(), t1.get(), t2.get(), wp);  // (1+w) log1p(w)
    arb_log(t2.get(), w.get(), wp);
    arb_mul(t2.get(), t2.get(), w.get(), wp);  // w log w
    arb_sub(f, t1.get(), t2.get(), wp);
  } else {
    arb_inv(t1.get(), w.get(), wp);
    arb_log1p(t1.get(), t1.get(), wp);
    arb_add_ui(t2.get(), w.get(), 1, wp);
    arb_mul(t1.get(), t1.get(), t2.get(), wp);  // (1+w) log1p(1/w)
    arb_log(t2.get(), w.get(), wp);
    arb_add(f, t1.get(), t2.get(), wp);
  }
}

slong clog2(std::int64_t n) {
  slong b = 0;
  while ((std::int64_t{1} << b) < n) ++b;
  return b;
}

// Upper bounds e_j(x_1..x_n), j = 0..n, of the elementary symmetric functions
// of non-negative balls x (ball arithmetic; e[j] contains the exact value).
void elementary_symmetric(std::vector<Arb>& e, const std::vector<const arb_struct*>& x, slong prec) {
  const std::size_t n = x.size();
  e = std::vector<Arb>(n + 1);
  arb_one(e[0].get());
  Arb t;
  for (std::size_t i = 0; i < n; ++i)
    for (std::size_t j = i + 1; j >= 1; --j) {
      arb_mul(t.get(), e[j - 1].get(), x[i], prec);
      arb_add(e[j].get(), e[j].get(), t.get(), prec);
    }
}

// The characteristic polynomial of J G, reduced to q(y) = prod_j (y - mu_j^2),
// by multi-modular reduction and CRT (FLINT nmod_mat_charpoly per prime,
// fmpz_comb for the reductions and the reconstruction). `bound_bits` must
// satisfy |q_i| < 2^bound_bits for every coefficient: then the symmetric CRT
// over primes with product > 2^(bound_bits + 1) is exact. A further prime,
// not used in the reconstruction, checks the result; false on a mismatch.
class ModularCharpoly {
 public:
  // q from the exact G under the bound |q_i| < 2^bound_bits; false when the
  // guard prime disagrees.
  bool even_charpoly(fmpz_poly_t q, const fmpz_mat_t G, const LightCone& lc, slong k, slong bound_bits) {
    const slong n = 2 * k;
    // q-p decoupled sigma_A = X (+) Z (position-class circuits on q-p
    // product states): k x k instead of 2k x 2k below.
    bool decoupled = true;
    for (slong a = 0; a < k && decoupled; ++a)
      for (slong b = k; b < n && decoupled; ++b) decoupled = fmpz_is_zero(fmpz_mat_entry(G, a, b));
    // Primes p > 2^27: np of them reconstruct |q_i| < 2^bound_bits (signed).
    // Rounded up to a multiple of 64 primes so that the comb (product tree and
    // CRT inverses) is rebuilt only every few steps as the bound grows.
    const slong np = 64 * ((std::max<slong>(1, (bound_bits + 1 + multimod::kPrimeBits - 1) / multimod::kPrimeBits) +
                            63) / 64);
    const std::size_t unp = static_cast<std::size_t>(np);
    multimod::extend_primes(primes_, unp);
    set_comb(np);
    multimod::Moduli md;
    md.primes = primes_.data();
    md.np = unp;
    // The residues of each distinct entry of G, placed (negated where J puts a
    // minus) into the lane array(s) of the matrix whose characteristic
    // polynomial is taken: J G (2k x 2k) or, decoupled, Z and X (k x k).
    const std::size_t nn = static_cast<std::size_t>(n * n), kk = static_cast<std::size_t>(k * k);
    std::vector<std::uint32_t> a, z, x;
    if (decoupled) {
      z.resize(kk * unp);
      x.resize(kk * unp);
    } else {
      a.resize(nn * unp);
    }
    std::vector<mp_limb_t> r(unp);
    auto put = [&](std::vector<std::uint32_t>& dst, std::size_t E, slong i, slong j, slong dim, bool negate) {
      const std::size_t e = static_cast<std::size_t>(i * dim + j);
      for (std::size_t ip = 0; ip < unp; ++ip) {
        const std::uint32_t v = static_cast<std::uint32_t>(r[ip]);
        dst[multimod::lane_index(E, e, ip)] = negate && v != 0 ? static_cast<std::uint32_t>(primes_[ip]) - v : v;
      }
    };
    for (slong u = 0; u < n; ++u)
      for (slong v = u; v < n; ++v) {
        if (decoupled && u < k && v >= k) continue;  // zero block
        fmpz_multi_mod_ui(r.data(), fmpz_mat_entry(G, u, v), comb_->comb(), comb_->temp());
        for (int side = 0; side < (u == v ? 1 : 2); ++side) {
          const slong row = side == 0 ? u : v, col = side == 0 ? v : u;  // G(row, col)
          if (decoupled) {
            if (row < k)
              put(x, kk, row, col, k, false);
            else
              put(z, kk, row - k, col - k, k, false);
          } else if (row >= k) {
            put(a, nn, row - k, col, n, false);  // J G (i, .) = G(i + k, .)
          } else {
            put(a, nn, row + k, col, n, true);  // J G (i + k, .) = -G(i, .)
          }
        }
      }
    const std::size_t k1 = static_cast<std::size_t>(k + 1), n1 = static_cast<std::size_t>(n + 1);
    std::vector<std::uint32_t> qres(k1 * unp);
    if (decoupled) {
      // sigma_A = X (+) Z: mu_j^2 are the eigenvalues of Z X, q = charpoly(Z X).
      multimod::charpoly_of_product(md, static_cast<int>(k), z.data(), x.data(), qres.data());
    } else {
      std::vector<std::uint32_t> cp(n1 * unp);
      multimod::charpoly(md, static_cast<int>(n), a.data(), cp.data());
      // charpoly(JG)(x) = q(-x^2) (-1)^k: even, q_i = (-1)^(k+i) c_2i.
      for (std::size_t ip = 0; ip < unp; ++ip) {
        const std::uint32_t p = static_cast<std::uint32_t>(primes_[ip]);
        for (slong i = 0; i <= k; ++i) {
          const std::uint32_t c = cp[multimod::lane_index(n1, static_cast<std::size_t>(2 * i), ip)];
          qres[multimod::lane_index(k1, static_cast<std::size_t>(i), ip)] = (k + i) % 2 != 0 && c != 0 ? p - c : c;
          if (i < k && cp[multimod::lane_index(n1, static_cast<std::size_t>(2 * i + 1), ip)] != 0)
            return false;  // must be even
        }
      }
    }
    fmpz_poly_zero(q);
    Fmpz c;
    for (slong i = 0; i <= k; ++i) {
      for (std::size_t ip = 0; ip < unp; ++ip) r[ip] = qres[multimod::lane_index(k1, static_cast<std::size_t>(i), ip)];
      fmpz_multi_CRT_ui(c.get(), r.data(), comb_->comb(), comb_->temp(), 1);
      fmpz_poly_set_coeff_fmpz(q, i, c.get());
    }
    // Guard prime (62-bit, outside both CRT sets): G mod it straight from the
    // exact R_t (not from G, so it also checks the multi-modular G), the
    // characteristic polynomial with FLINT's nmod arithmetic.
    const mp_limb_t pg = guard_prime();
    std::vector<mp_limb_t> gmod;
    lc.gram_mod(gmod, pg);
    std::vector<mp_limb_t> gq(static_cast<std::size_t>(k + 1));
    if (!charpoly_mod(
            gq, [&](slong a, slong b) { return gmod[static_cast<std::size_t>(a * n + b)]; }, k, pg, false))
      return false;
    for (slong i = 0; i <= k; ++i) {
      fmpz_poly_get_coeff_fmpz(c.get(), q, i);
      if (fmpz_fdiv_ui(c.get(), pg) != gq[static_cast<std::size_t>(i)]) return false;
    }
    return fmpz_poly_degree(q) == k && fmpz_is_one(fmpz_poly_lead(q));
  }

 private:
  // q mod p from G mod p (entry(a, b)): the even part of charpoly(J G) with
  // its sign, or (decoupled) charpoly(Z X) with X, Z the diagonal blocks.
  template <class Entry>
  static bool charpoly_mod(std::vector<mp_limb_t>& out, Entry entry, slong k, mp_limb_t p, bool decoupled) {
    const slong n = 2 * k;
    bool ok = true;
    flint::NModPoly cp(p);
    if (decoupled) {
      flint::NModMat X(k, k, p), Z(k, k, p), ZX(k, k, p);
      for (slong i = 0; i < k; ++i)
        for (slong j = 0; j < k; ++j) {
          nmod_mat_entry(X.get(), i, j) = entry(i, j);
          nmod_mat_entry(Z.get(), i, j) = entry(i + k, j + k);
        }
      nmod_mat_mul(ZX.get(), Z.get(), X.get());
      nmod_mat_charpoly(cp.get(), ZX.get());
      ok = nmod_poly_degree(cp.get()) == k;
      for (slong i = 0; i <= k && ok; ++i) out[static_cast<std::size_t>(i)] = nmod_poly_get_coeff_ui(cp.get(), i);
    } else {
      flint::NModMat A(n, n, p);
      for (slong i = 0; i < k; ++i)
        for (slong j = 0; j < n; ++j) {
          nmod_mat_entry(A.get(), i, j) = entry(i + k, j);
          nmod_mat_entry(A.get(), i + k, j) = nmod_neg(entry(i, j), A.get()->mod);
        }
      nmod_mat_charpoly(cp.get(), A.get());
      ok = nmod_poly_degree(cp.get()) == n;
      for (slong i = 0; i <= k && ok; ++i) {
        mp_limb_t v = nmod_poly_get_coeff_ui(cp.get(), 2 * i);
        if ((k + i) % 2 != 0) v = nmod_neg(v, A.get()->mod);
        out[static_cast<std::size_t>(i)] = v;
        if (i < k && nmod_poly_get_coeff_ui(cp.get(), 2 * i + 1) != 0) ok = false;  // must be even
      }
    }
    return ok;
  }

  static mp_limb_t guard_prime() {
    static const mp_limb_t p = n_nextprime(UWORD(1) << 62, 1);
    return p;
  }
  void set_comb(slong np) {
    if (comb_np_ == np) return;
    comb_.reset();
    comb_ = std::make_unique<flint::Comb>(primes_.data(), np);
    comb_np_ = np;
  }

  std::vector<std::uint64_t> primes_;  // the CRT primes, 28-bit
  std::unique_ptr<flint::Comb> comb_;
  slong comb_np_ = 0;
};


// Symplectic spectrum and entropy of sigma_A(t) = G / (2 Den), t = 0, 1, ...
// in order. Besides the answer it keeps upper bounds Y_j >= mu_j(t)^2 for the
// next step's coefficient bound (see coefficient_bound_bits).
class SpectrumSolver {
 public:
  SpectrumSolver(std::int64_t k, const fmpz_t den, const arb_t growth2) : k_(k) {
    fmpz_mul(den2_.get(), den, den);
    fmpz_mul_ui(c4_.get(), den2_.get(), 4);
    arb_set(growth2_.get(), growth2);
  }

  std::int64_t fallbacks() const { return fallbacks_; }
  std::int64_t root_fallbacks() const { return root_fallbacks_; }

  PointResult evaluate(LightCone& lc, const EntropyOptions& opt) {
    PointResult out;
    const slong k = k_;
    if (k == 0) return out;
    FmpzPoly q;
    FmpzMat G(2 * k, 2 * k);
    if (opt.reference) {
      lc.gram_dot(G.get());
      flint_charpoly(q.get(), G.get());
    } else {
      lc.gram(G.get());
      if (!ModularOK(q.get(), G.get(), lc)) {
        // The guard prime disagreed (a wrong bound or G would be a bug):
        // recompute with FLINT's own Hadamard-bounded modular characteristic
        // polynomial of the G of the big-integer dot products.
        ++fallbacks_;
        lc.gram_dot(G.get());
        flint_charpoly(q.get(), G.get());
      }
    }
    // Q(z) = q(z + Den^2): roots z_j = mu_j^2 - Den^2 = 4 Den^2 (nu_j^2 - 1/4) >= 0.
    FmpzPoly Q;
    fmpz_poly_taylor_shift(Q.get(), q.get(), den2_.get());
    // nu = 1/2 exactly <=> z = 0: split off z^m symbolically.
    slong m = 0;
    while (m <= k && fmpz_is_zero(fmpz_poly_get_coeff_ptr(Q.get(), m))) ++m;
    if (m > k) throw std::logic_error("gaussian_entropy_curve: zero characteristic polynomial");
    out.pure = m;
    fmpz_poly_shift_right(Q.get(), Q.get(), m);
    std::vector<ModeBall> nus(static_cast<std::size_t>(m), ModeBall{0.5, 0.0});
    // Next step's bounds: Den^2 for each pure mode.
    std::vector<std::unique_ptr<Arb>> Y;
    for (slong i = 0; i < m; ++i) {
      Y.push_back(std::make_unique<Arb>());
      arb_set_fmpz(Y.back()->get(), den2_.get());
    }
    if (fmpz_poly_degree(Q.get()) <= 0) {
      out.prec = 0;
      if (opt.keep_spectrum) out.nu = std::move(nus);
      set_bounds(std::move(Y));
      return out;
    }
    // Squarefree parts (poly, multiplicity). Generically Q itself is
    // squarefree: that is proven when all its roots come out isolated, so the
    // (costly, big-coefficient) squarefree factorisation is done only when
    // that fails or for the reference path.
    // Repeated nu's (symmetric regions) make Q a perfect square more often
    // than not: an exact square root (FLINT, verified) is far cheaper than
    // the squarefree factorisation, which is the next step if the root of
    // the square still does not isolate.
    PolyFactor fac;
    FmpzPoly half;
    int factored = 0;  // 0: Q itself, 1: Q = half^2, 2: squarefree factorisation
    std::vector<std::pair<const fmpz_poly_struct*, slong>> parts = {{Q.get(), 1}};
    auto factor = [&]() {
      parts.clear();
      if (factored == 0 && fmpz_poly_degree(Q.get()) % 2 == 0 && fmpz_poly_sqrt(half.get(), Q.get())) {
        parts.emplace_back(half.get(), 2);
        factored = 1;
        return;
      }
      fmpz_poly_factor_squarefree(fac.get(), Q.get());
      for (slong i = 0; i < fac.get()->num; ++i) parts.emplace_back(fac.get()->p + i, fac.get()->exp[i]);
      factored = 2;
    };
    if (opt.reference) {
      factored = 1;  // straight to the squarefree factorisation
      factor();
    }
    // Each root z with relative error 2^-prec moves S by at most ~2^-prec
    // (mode_entropy): start ~64 bits beyond the mode count, double until the
    // radius meets the target. arb_fmpz_poly_complex_roots itself raises its
    // internal precision from the coefficient sizes until the roots are
    // isolated and refined to `prec` relative bits.
    slong prec = 64 + 2 * clog2(k + 1);
    Arb S, f, nu, y;
    bool have_bounds = false;
    for (;;) {
      arb_zero(S.get());
      bool ok = true;
      std::vector<std::pair<double, double>> nu_here;
      std::vector<std::unique_ptr<Arb>> Yr;
      bool refactored = false;
      for (std::size_t i = 0; i < parts.size() && ok; ++i) {
        const fmpz_poly_struct* fi = parts[i].first;
        const slong mult = parts[i].second;
        const slong deg = fmpz_poly_degree(fi);
        if (deg <= 0) continue;
        AcbVec roots(deg);
        if (opt.reference) {
          arb_fmpz_poly_complex_roots(roots.get(), fi, 0, prec);
        } else if (!(opt.fast_roots && separated_positive_roots(roots.get(), fi, prec))) {
          if (factored < 2) {  // maybe not squarefree: factor (further) and redo this precision
            factor();
            refactored = true;
            break;
          }
          if (!validated_positive_roots(roots.get(), fi, prec, 5)) {
            ++root_fallbacks_;
            arb_fmpz_poly_complex_roots(roots.get(), fi, 0, prec);
          }
        }
        for (slong r = 0; r < deg && ok; ++r) {
          const acb_struct* z = roots[r];
          if (!arb_is_zero(acb_imagref(z)))
            throw std::logic_error("gaussian_entropy_curve: non-real symplectic eigenvalue (internal error)");
          if (arb_is_negative(acb_realref(z)))
            throw std::logic_error(
                "gaussian_entropy_curve: symplectic eigenvalue below 1/2 (internal error)");
          if (!arb_is_positive(acb_realref(z))) {
            ok = false;  // enclosure still touches 0: more precision
            break;
          }
          mode_entropy(f.get(), nu.get(), acb_realref(z), c4_.get(), prec + 32);
          arb_addmul_si(S.get(), f.get(), mult, prec + 32);
          arb_add_fmpz(y.get(), acb_realref(z), den2_.get(), prec + 32);  // mu^2
          for (slong e = 0; e < mult; ++e) {
            Yr.push_back(std::make_unique<Arb>());
            arb_set(Yr.back()->get(), y.get());
          }
          if (opt.keep_spectrum) {
            const auto [mid, rad] = ball_to_double(nu.get());
            for (slong e = 0; e < mult; ++e) nu_here.emplace_back(mid, rad);
          }
        }
      }
      if (refactored) continue;  // same precision, now on the squarefree parts
      if (ok) {
        const auto [mid, rad] = ball_to_double(S.get());
        out.entropy = mid;
        out.radius = rad;
        out.prec = prec;
        // The target is on the enclosure; rounding its midpoint to double
        // (half an ulp, included in `radius`) cannot be reduced.
        out.met = mag_get_d(arb_radref(S.get())) <= opt.target_radius;  // rounds up
        if (opt.keep_spectrum) {
          out.nu = nus;
          for (const auto& [a, b] : nu_here) out.nu.push_back(ModeBall{a, b});
        }
        std::vector<std::unique_ptr<Arb>> Yall;
        for (const auto& p : Y) {
          Yall.push_back(std::make_unique<Arb>());
          arb_set(Yall.back()->get(), p->get());
        }
        for (auto& p : Yr) Yall.push_back(std::move(p));
        set_bounds(std::move(Yall));
        have_bounds = true;
        if (out.met) break;
      } else if (!have_bounds) {
        // No certified enclosure yet (a root ball still touches z = 0).
        out.met = false;
        out.entropy = std::nan("");
        out.radius = INFINITY;
        out.prec = prec;
      }
      if (2 * prec > opt.max_prec_bits) break;
      prec *= 2;
    }
    if (!have_bounds) Yprev_.clear();  // next step falls back to Hadamard-Fischer
    if (opt.keep_spectrum)
      std::sort(out.nu.begin(), out.nu.end(),
                [](const ModeBall& a, const ModeBall& b) { return a.mid > b.mid; });
    return out;
  }

 private:
  bool ModularOK(fmpz_poly_t q, const fmpz_mat_t G, const LightCone& lc) {
    std::vector<Arb> diag;
    lc.gram_diagonal(diag);
    return modular_.even_charpoly(q, G, lc, k_, coefficient_bound_bits(diag));
  }

  void flint_charpoly(fmpz_poly_t q, const fmpz_mat_t G) {
    const slong k = k_, n = 2 * k;
    // JG with J = [[0, I], [-I, 0]].
    FmpzMat JG(n, n);
    for (slong i = 0; i < k; ++i)
      for (slong j = 0; j < n; ++j) {
        fmpz_set(fmpz_mat_entry(JG.get(), i, j), fmpz_mat_entry(G, i + k, j));
        neg(fmpz_mat_entry(JG.get(), i + k, j), fmpz_mat_entry(G, i, j));
      }
    FmpzPoly cp;  // freshly zero, as FLINT 2.9's fmpz_mat_charpoly wants (unit_circle.cpp)
    fmpz_mat_charpoly(cp.get(), JG.get());
    fmpz_poly_zero(q);
    Fmpz c;
    for (slong i = 0; i <= k; ++i) {
      fmpz_poly_get_coeff_fmpz(c.get(), cp.get(), 2 * i);
      if ((k + i) % 2 != 0) neg(c.get(), c.get());
      fmpz_poly_set_coeff_fmpz(q, i, c.get());
      if (i < k) {
        fmpz_poly_get_coeff_fmpz(c.get(), cp.get(), 2 * i + 1);
        if (!fmpz_is_zero(c.get()))
          throw std::logic_error(
              "gaussian_entropy_curve: characteristic polynomial of J sigma_A is not even");
      }
    }
  }

  // A rigorous e with |q_i| < 2^e for all coefficients of
  // q(y) = prod_j (y - mu_j^2), q_{k-i} = (-1)^i e_i(mu^2), as the smaller of
  //  (a) Hadamard-Fischer: e_i(mu^2) = |E_{2i}(JG)| (sum of principal minors)
  //      <= e_{2i}(singular values of JG) = e_{2i}(eig G) <= e_{2i}(diag G)
  //      (J is orthogonal; G is positive definite);
  //  (b) growth: G(t) <= g G(t-1) in the Loewner order with g = ||D^-1/2 S D^1/2||_2^2,
  //      and symplectic eigenvalues are monotone and homogeneous (Bhatia & Jain,
  //      J. Math. Phys. 56, 112201 (2015)), so mu_j(t)^2 <= g^2 Y_j with Y_j the
  //      sorted upper bounds of mu_j(t-1)^2: e_i(mu^2) <= e_i(g^2 Y).
  slong coefficient_bound_bits(const std::vector<Arb>& diag) {
    const slong k = k_, n = 2 * k, wp = 64;
    std::vector<const arb_struct*> dp;
    for (slong a = 0; a < n; ++a) dp.push_back(diag[static_cast<std::size_t>(a)].get());
    std::vector<Arb> eh;
    elementary_symmetric(eh, dp, wp);
    std::vector<Arb> eg;
    const bool grow = static_cast<slong>(Yprev_.size()) == k;
    std::vector<Arb> gy(static_cast<std::size_t>(k));
    if (grow) {
      std::vector<const arb_struct*> yp;
      for (slong j = 0; j < k; ++j) {
        arb_mul(gy[static_cast<std::size_t>(j)].get(), Yprev_[static_cast<std::size_t>(j)]->get(), growth2_.get(), wp);
        yp.push_back(gy[static_cast<std::size_t>(j)].get());
      }
      elementary_symmetric(eg, yp, wp);
    }
    slong e = 1;
    Arf ub, ub2;
    for (slong i = 0; i <= k; ++i) {
      arb_get_ubound_arf(ub.get(), eh[static_cast<std::size_t>(2 * i)].get(), wp);
      if (grow) {
        arb_get_ubound_arf(ub2.get(), eg[static_cast<std::size_t>(i)].get(), wp);
        if (arf_cmp(ub2.get(), ub.get()) < 0) arf_set(ub.get(), ub2.get());
      }
      if (!arf_is_finite(ub.get()))
        throw std::logic_error("gaussian_entropy_curve: non-finite coefficient bound");
      e = std::max(e, arf_abs_bound_lt_2exp_si(ub.get()) + 1);
    }
    return e;
  }

  // Keeps the upper ends of the balls Y (each >= the exact mu_j^2), sorted
  // descending: the j-th largest upper end bounds the j-th largest mu^2.
  void set_bounds(std::vector<std::unique_ptr<Arb>> Y) {
    std::vector<Arf> ups(Y.size());
    for (std::size_t j = 0; j < Y.size(); ++j) arb_get_ubound_arf(ups[j].get(), Y[j]->get(), 64);
    std::vector<std::size_t> idx(Y.size());
    std::iota(idx.begin(), idx.end(), std::size_t{0});
    std::sort(idx.begin(), idx.end(),
              [&](std::size_t a, std::size_t b) { return arf_cmp(ups[a].get(), ups[b].get()) > 0; });
    std::vector<std::unique_ptr<Arb>> U;
    for (std::size_t j : idx) {
      U.push_back(std::make_unique<Arb>());
      arb_set_arf(U.back()->get(), ups[j].get());
    }
    Yprev_ = std::move(U);
  }

  std::int64_t k_;
  Fmpz den2_, c4_;
  Arb growth2_;  // upper bound of g^2
  std::vector<std::unique_ptr<Arb>> Yprev_;
  ModularCharpoly modular_;
  std::int64_t fallbacks_ = 0;
  std::int64_t root_fallbacks_ = 0;
};

// An upper bound of g^2, g = ||X||_2^2 with X = D^-1/2 S D^1/2
// (X_ij = S_ij sqrt(D_j / D_i)): ||X||_2^2 <= ||X||_1 ||X||_inf.
void growth_bound(arb_t g2, const SparseInt& S, const Problem& pr) {
  const slong wp = 64;
  const std::int64_t n = S.n;
  std::vector<Arb> rows(static_cast<std::size_t>(n)), cols(static_cast<std::size_t>(n));
  Arb x, r;
  for (std::int64_t i = 0; i < n; ++i)
    for (std::int64_t e = S.rowptr[i]; e < S.rowptr[i + 1]; ++e) {
      const std::int64_t j = S.col[e];
      arb_set_fmpz(x.get(), pr.D[static_cast<std::size_t>(j)].get());
      arb_div_fmpz(x.get(), x.get(), pr.D[static_cast<std::size_t>(i)].get(), wp);
      arb_sqrt(x.get(), x.get(), wp);
      const std::int64_t v = S.val[e] < 0 ? -S.val[e] : S.val[e];
      arb_mul_ui(x.get(), x.get(), static_cast<ulong>(v), wp);
      arb_add(rows[static_cast<std::size_t>(i)].get(), rows[static_cast<std::size_t>(i)].get(), x.get(), wp);
      arb_add(cols[static_cast<std::size_t>(j)].get(), cols[static_cast<std::size_t>(j)].get(), x.get(), wp);
    }
  Arf mr, mc, u;
  arf_zero(mr.get());
  arf_zero(mc.get());
  for (std::int64_t i = 0; i < n; ++i) {
    arb_get_ubound_arf(u.get(), rows[static_cast<std::size_t>(i)].get(), wp);
    if (arf_cmp(u.get(), mr.get()) > 0) arf_set(mr.get(), u.get());
    arb_get_ubound_arf(u.get(), cols[static_cast<std::size_t>(i)].get(), wp);
    if (arf_cmp(u.get(), mc.get()) > 0) arf_set(mc.get(), u.get());
  }
  arb_set_arf(g2, mr.get());
  arb_set_arf(r.get(), mc.get());
  arb_mul(g2, g2, r.get(), wp);  // g <= ||X||_1 ||X||_inf
  arb_mul(g2, g2, g2, wp);   // g^2
}

}  // namespace

EntropyCurve gaussian_entropy_curve(const Circuit& c, const std::vector<GaussianSite>& init,
                                    const std::vector<std::int64_t>& region, std::int64_t T,
                                    const EntropyOptions& opt) {
  if (T < 0)
    throw InvalidInput("gaussian_entropy_curve: T = " + std::to_string(T) + " must be >= 0");
  if (!(opt.target_radius > 0.0))
    throw InvalidInput("gaussian_entropy_curve: target_radius must be > 0");
  if (opt.max_prec_bits < 64)
    throw InvalidInput("gaussian_entropy_curve: max_prec_bits must be >= 64");
  if (c.L < 1) throw InvalidInput("gaussian_entropy_curve: circuit has L = " + std::to_string(c.L));
  if (static_cast<std::int64_t>(init.size()) != c.L)
    throw InvalidInput("gaussian_entropy_curve: " + std::to_string(init.size()) +
                                " initial sites for L = " + std::to_string(c.L));
  Problem pr;
  pr.L = c.L;
  pr.k = static_cast<std::int64_t>(region.size());
  {
    std::vector<char> seen(static_cast<std::size_t>(c.L), 0);
    for (std::int64_t a : region) {
      if (a < 0 || a >= c.L)
        throw InvalidInput("gaussian_entropy_curve: region site " + std::to_string(a) +
                                    " is outside [0, " + std::to_string(c.L) + ")");
      if (seen[static_cast<std::size_t>(a)])
        throw InvalidInput("gaussian_entropy_curve: region site " + std::to_string(a) +
                                    " is repeated");
      seen[static_cast<std::size_t>(a)] = 1;
    }
  }
  build_sigma0(pr, init);
  const SparseInt S = assemble_period(c);  // validates the circuit (ModelError)
  for (std::int64_t a : region) pr.rows.push_back(a);
  for (std::int64_t a : region) pr.rows.push_back(c.L + a);

  EntropyCurve out;
  const std::size_t nt = static_cast<std::size_t>(T) + 1;
  out.entropy.reserve(nt);
  out.radius.reserve(nt);
  out.bits.reserve(nt);
  out.columns.reserve(nt);
  out.pure_modes.reserve(nt);
  out.prec_bits.reserve(nt);
  out.met_target.reserve(nt);
  if (opt.keep_spectrum) {
    out.nu.reserve(nt);
    out.nu_radius.reserve(nt);
  }
  LightCone lc(pr, S, opt.residue_budget_bytes);
  Arb g2;
  growth_bound(g2.get(), S, pr);
  SpectrumSolver solver(pr.k, pr.den.get(), g2.get());
  for (std::int64_t t = 0; t <= T; ++t) {
    if (t > 0) lc.step();
    PointResult r = solver.evaluate(lc, opt);
    out.entropy.push_back(r.entropy);
    out.radius.push_back(r.radius);
    out.bits.push_back(lc.bits());
    out.columns.push_back(lc.columns());
    out.pure_modes.push_back(r.pure);
    out.prec_bits.push_back(r.prec);
    out.met_target.push_back(r.met ? 1 : 0);
    if (!r.met) ++out.failures;
    if (opt.keep_spectrum) {
      std::vector<double> mid, rad;
      for (const ModeBall& b : r.nu) {
        mid.push_back(b.mid);
        rad.push_back(b.rad);
      }
      out.nu.push_back(std::move(mid));
      out.nu_radius.push_back(std::move(rad));
    }
  }
  out.charpoly_fallbacks = solver.fallbacks();
  out.root_fallbacks = solver.root_fallbacks();
  return out;
}

double gaussian_work_bytes(const EntropyCurve& probe, std::int64_t t1, std::int64_t t2, std::int64_t T,
                           std::size_t region_size, std::int64_t L, const EntropyOptions& opt) {
  const auto n = probe.bits.size();
  if (!(t1 >= 0 && t1 < t2 && static_cast<std::size_t>(t2) < n && probe.columns.size() == n &&
        probe.entropy.size() == n && T >= t2))
    throw InvalidInput("gaussian_work_bytes: need 0 <= t1 < t2 <= T within the probe curve");
  // Linear extrapolation from t1, t2 to T of the entry bits of R_t, its
  // light-cone columns (at most 2L) and S_A(t).
  const auto u1 = static_cast<std::size_t>(t1), u2 = static_cast<std::size_t>(t2);
  auto at_T = [&](double a, double b) {
    return b + (b - a) * static_cast<double>(T - t2) / static_cast<double>(t2 - t1);
  };
  const double bits = std::max(64.0, at_T(static_cast<double>(probe.bits[u1]), static_cast<double>(probe.bits[u2])));
  const double cols = std::min(2.0 * static_cast<double>(L), at_T(static_cast<double>(probe.columns[u1]),
                                                                  static_cast<double>(probe.columns[u2])));
  const double S = std::max(0.0, at_T(probe.entropy[u1], probe.entropy[u2]));
  const double rows = 2.0 * static_cast<double>(region_size);
  // LightCone: R_t exactly (fmpz limbs plus the mpz header), and its residues
  // (two uint32 lane arrays) modulo the primes that reconstruct G, while they
  // fit residue_budget_bytes (past it they are dropped: the peak is the budget).
  const double exact = rows * cols * (bits / 8 + 32);
  const double need_bits = 2 * bits + 64 + std::log2(std::max(cols, 1.0)) + 2;
  const double nres = std::ceil(need_bits / multimod::kPrimeBits / multimod::kLanes) * multimod::kLanes;
  const double residues = std::min(static_cast<double>(opt.residue_budget_bytes), rows * cols * nres * 8);
  // The characteristic polynomial: coefficients of about 2 S / ln 2 bits,
  // primes in blocks of 64; G and four Berkowitz work arrays per prime.
  const double np = 64 * std::ceil((2 * S / std::log(2.0) + 64) / multimod::kPrimeBits / 64);
  const double charpoly = np * rows * rows * 4 * 5;
  return exact + residues + charpoly;
}

}  // namespace toral

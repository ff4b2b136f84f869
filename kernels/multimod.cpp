#include "multimod.hpp"
#include "errors.hpp"

#include <flint/fmpz_vec.h>
#include <flint/ulong_extras.h>

#include <algorithm>
#include <stdexcept>
#include <string>
#include <utility>

namespace toral::multimod {

void extend_primes(std::vector<std::uint64_t>& primes, std::size_t count) {
  while (primes.size() < count) {
    const std::uint64_t p = n_nextprime(primes.empty() ? kPrimeMin : primes.back(), 1);  // proven prime
    if (p >= kPrimeMax) throw std::length_error("multimod::extend_primes: ran out of 28-bit primes");
    primes.push_back(p);
  }
}

namespace {

constexpr int W = static_cast<int>(kLanes);
constexpr int kChunk = 16;  // products summed in 64 bits before one reduction: 16 p^2 < p 2^32

#define TORAL_LANES for (int l = 0; l < W; ++l)

// The lane kernels are compiled for AVX-512, AVX2 and the baseline and the
// best is picked at run time on x86-64 (GCC function multiversioning);
// elsewhere (or with TORAL_NO_LANE_CLONES, as the baseline test build does)
// they are compiled once for the target.
#if defined(__x86_64__) && defined(__GNUC__) && !defined(__clang__) && !defined(TORAL_NO_LANE_CLONES)
#define TORAL_LANE_CLONES __attribute__((target_clones("avx512f", "avx2", "default")))
#else
#define TORAL_LANE_CLONES
#endif

// Montgomery constants of one block of lanes, R = 2^32:
// ninv = -p^-1 mod R, r2 = R^2 mod p.
struct Mod {
  alignas(64) std::uint32_t p[W];
  alignas(64) std::uint32_t ninv[W];
  alignas(64) std::uint32_t r2[W];
};

void check_moduli(const Moduli& md) {
  if (md.np == 0 || md.np % kLanes != 0 || md.primes == nullptr)
    throw InvalidInput("multimod: np = " + std::to_string(md.np) + " must be a positive multiple of " +
                                std::to_string(kLanes));
}

void set_mod(Mod& m, const std::uint64_t* primes) {
  for (int l = 0; l < W; ++l) {
    const std::uint64_t p = primes[l];
    if (p <= kPrimeMin || p >= kPrimeMax || p % 2 == 0)
      throw InvalidInput("multimod: modulus " + std::to_string(p) +
                                  " is not an odd number in (2^27, 2^28)");
    std::uint32_t inv = static_cast<std::uint32_t>(p);  // correct mod 2^3 for odd p
    for (int it = 0; it < 4; ++it) inv *= 2u - static_cast<std::uint32_t>(p) * inv;  // 3 -> 48 bits
    m.p[l] = static_cast<std::uint32_t>(p);
    m.ninv[l] = 0u - inv;
    const std::uint64_t r = (std::uint64_t{1} << 32) % p;
    m.r2[l] = static_cast<std::uint32_t>((r * r) % p);
  }
}

// One lane of redc below, for the few scalar conversions.
std::uint32_t redc1(std::uint64_t x, std::uint32_t p, std::uint32_t ninv) {
  const std::uint32_t q = static_cast<std::uint32_t>(x) * ninv;
  const std::uint32_t u = static_cast<std::uint32_t>((x + static_cast<std::uint64_t>(q) * p) >> 32);
  return std::min(u, u - p);
}

// x < p 2^32 -> x R^-1 mod p in [0, p).
static inline __attribute__((always_inline)) void redc(std::uint32_t* __restrict out,
                                                       const std::uint64_t* __restrict x, const Mod& md) {
  TORAL_LANES {
    const std::uint32_t m = static_cast<std::uint32_t>(x[l]) * md.ninv[l];
    const std::uint32_t u = static_cast<std::uint32_t>((x[l] + static_cast<std::uint64_t>(m) * md.p[l]) >> 32);
    out[l] = std::min(u, u - md.p[l]);  // u < 2p < 2^32; u - p wraps around when u < p
  }
}

static inline __attribute__((always_inline)) void neg(std::uint32_t* __restrict out,
                                                      const std::uint32_t* __restrict x, const Mod& md) {
  TORAL_LANES { out[l] = x[l] == 0 ? 0 : md.p[l] - x[l]; }
}

// out = sum_j a_j b_j over the lane vectors (a_j, b_j) = terms(j), j < len
// (a_j in Montgomery form, b_j plain; out plain), reduced once per kChunk.
template <class Terms>
static inline __attribute__((always_inline)) void dot_terms(std::uint32_t* __restrict out, std::ptrdiff_t len,
                                                            const Mod& md, Terms terms) {
  alignas(64) std::uint64_t acc[W];
  alignas(64) std::uint32_t res[W] = {0}, r[W];
  for (std::ptrdiff_t s = 0; s < len; s += kChunk) {
    const std::ptrdiff_t e = std::min<std::ptrdiff_t>(len, s + kChunk);
    TORAL_LANES { acc[l] = 0; }
    for (std::ptrdiff_t j = s; j < e; ++j) {
      const auto [aj, bj] = terms(j);
      TORAL_LANES { acc[l] += static_cast<std::uint64_t>(aj[l]) * bj[l]; }
    }
    redc(r, acc, md);
    TORAL_LANES {
      const std::uint32_t v = res[l] + r[l];  // < 2p < 2^32
      res[l] = std::min(v, v - md.p[l]);
    }
  }
  TORAL_LANES { out[l] = res[l]; }
}

// The strided case: a_j = a + j as, b_j = b + j bs (element strides).
static inline __attribute__((always_inline)) void dot(std::uint32_t* __restrict out, const std::uint32_t* a,
                                                      std::ptrdiff_t as, const std::uint32_t* b,
                                                      std::ptrdiff_t bs, std::ptrdiff_t len, const Mod& md) {
  dot_terms(out, len, md, [&](std::ptrdiff_t j) { return std::pair{a + j * as, b + j * bs}; });
}

// out = a b R^-1 (one Montgomery product; a b < 2^56 < p 2^32).
static inline __attribute__((always_inline)) void mont_mul(std::uint32_t* out, const std::uint32_t* a,
                                                           const std::uint32_t* b, const Mod& md) {
  alignas(64) std::uint64_t x[W];
  TORAL_LANES { x[l] = static_cast<std::uint64_t>(a[l]) * b[l]; }
  redc(out, x, md);
}

// Plain -> Montgomery form a R mod p.
static inline __attribute__((always_inline)) void to_mont(std::uint32_t* out, const std::uint32_t* a,
                                                          const Mod& md) {
  mont_mul(out, a, md.r2, md);
}

std::vector<std::uint32_t> lanes(std::size_t entries) { return std::vector<std::uint32_t>(entries * W); }

// ---- Berkowitz: the characteristic polynomials of the leading r x r blocks
// A_r, r = 1..n, by p_r = T_r p_(r-1) with the Toeplitz column
// (1, -a_rr, -R C, -R M C, ..., -R M^(r-2) C), M = A_(r-1), R the new row,
// C the new column (coefficients from the highest degree down). No division.
// One block of lanes: a holds the plain entries (i, j) at a + (i n + j) W;
// Am: n n lane vectors of work space; prev/cur/t/tm: n + 1, v/vn: n.
// Writes entry c (the coefficient of x^c) of out.
TORAL_LANE_CLONES void berkowitz_block(
    int n, const std::uint32_t* a, std::uint32_t* Am, std::uint32_t* prev, std::uint32_t* cur, std::uint32_t* t,
    std::uint32_t* tm, std::uint32_t* v, std::uint32_t* vn, std::uint32_t* out, const Mod& md) {
  const std::size_t nn = static_cast<std::size_t>(n) * n;
  for (std::size_t e = 0; e < nn; ++e) to_mont(Am + e * W, a + e * W, md);
  TORAL_LANES { prev[l] = 1; }
  for (int r = 1; r <= n; ++r) {
    const int m = r - 1;  // the new row and column
    TORAL_LANES { t[l] = 1; }
    neg(t + W, a + (static_cast<std::size_t>(m) * n + m) * W, md);
    for (int i = 0; i < m; ++i) {
      const std::uint32_t* c = a + (static_cast<std::size_t>(i) * n + m) * W;
      TORAL_LANES { v[i * W + l] = c[l]; }
    }
    for (int j = 0; j + 2 <= r; ++j) {
      alignas(64) std::uint32_t d[W];
      dot(d, Am + static_cast<std::size_t>(m) * n * W, W, v, W, m, md);
      neg(t + (j + 2) * W, d, md);
      if (j + 3 <= r) {
        for (int i = 0; i < m; ++i) dot(vn + i * W, Am + static_cast<std::size_t>(i) * n * W, W, v, W, m, md);
        std::swap(v, vn);
      }
    }
    for (int i = 0; i <= r; ++i) to_mont(tm + i * W, t + i * W, md);
    // cur_i = sum_j t_(i-j) prev_j, 0 <= j <= min(i, r - 1) (then i - j <= r).
    for (int i = 0; i <= r; ++i) {
      const int j1 = std::min(i, r - 1);  // and j >= 0 = max(0, i - r): never empty
      dot(cur + i * W, tm + i * W, -W, prev, W, j1 + 1, md);
    }
    std::swap(prev, cur);
  }
  for (int c = 0; c <= n; ++c) {
    const std::uint32_t* src = prev + (n - c) * W;
    std::uint32_t* dst = out + static_cast<std::size_t>(c) * W;
    TORAL_LANES { dst[l] = src[l]; }
  }
}

// P = Z X (plain) from plain z, x (one block each).
TORAL_LANE_CLONES void product_block(int n, const std::uint32_t* z,
                                                                                 const std::uint32_t* x,
                                                                                 std::uint32_t* Zm,
                                                                                 std::uint32_t* P, const Mod& md) {
  const std::size_t nn = static_cast<std::size_t>(n) * n;
  for (std::size_t e = 0; e < nn; ++e) to_mont(Zm + e * W, z + e * W, md);
  const std::ptrdiff_t xs = static_cast<std::ptrdiff_t>(n) * W;
  for (int i = 0; i < n; ++i)
    for (int j = 0; j < n; ++j)
      dot(P + (static_cast<std::size_t>(i) * n + j) * W, Zm + static_cast<std::size_t>(i) * n * W, W,
          x + static_cast<std::size_t>(j) * W, xs, n, md);
}

TORAL_LANE_CLONES void combine_block(
    int rows, std::size_t in_cols, std::size_t out_cols, const std::int64_t* ptr, const std::int64_t* src,
    const std::int32_t* coef, const std::uint32_t* vm, const std::uint32_t* in, std::uint32_t* out,
    const Mod& md) {
  for (std::size_t o = 0; o < out_cols; ++o) {
    const std::int64_t t0 = ptr[o], nt = ptr[o + 1] - ptr[o];
    for (int r = 0; r < rows; ++r) {
      const std::uint32_t* row = in + static_cast<std::size_t>(r) * in_cols * W;
      dot_terms(out + (static_cast<std::size_t>(r) * out_cols + o) * W, nt, md, [&](std::ptrdiff_t t) {
        return std::pair{vm + static_cast<std::size_t>(coef[t0 + t]) * W, row + static_cast<std::size_t>(src[t0 + t]) * W};
      });
    }
  }
}

TORAL_LANE_CLONES void gram_block(
    int rows, std::size_t cols, const std::uint32_t* m, const std::uint32_t* wr2, const std::int32_t* widx,
    std::uint32_t* Mm, std::uint32_t* out, const Mod& md) {
  // Mm(a, c) = w_c m(a, c) R (Montgomery form), wr2 = w R^2 per weight.
  for (int a = 0; a < rows; ++a)
    for (std::size_t c = 0; c < cols; ++c) {
      const std::uint32_t* x = m + (static_cast<std::size_t>(a) * cols + c) * W;
      const std::uint32_t* w = widx ? wr2 + static_cast<std::size_t>(widx[c]) * W : md.r2;
      mont_mul(Mm + (static_cast<std::size_t>(a) * cols + c) * W, x, w, md);
    }
  for (int a = 0; a < rows; ++a)
    for (int b = a; b < rows; ++b) {
      alignas(64) std::uint32_t g[W];
      dot(g, Mm + static_cast<std::size_t>(a) * cols * W, W, m + static_cast<std::size_t>(b) * cols * W, W,
          static_cast<std::ptrdiff_t>(cols), md);
      std::uint32_t* d1 = out + (static_cast<std::size_t>(a) * rows + b) * W;
      std::uint32_t* d2 = out + (static_cast<std::size_t>(b) * rows + a) * W;
      TORAL_LANES {
        d1[l] = g[l];
        d2[l] = g[l];
      }
    }
}

}  // namespace

void reduce(const Moduli& md, std::size_t ip0, std::size_t ip1, const fmpz* const* values, std::size_t count,
            std::uint32_t* out) {
  check_moduli(md);
  if (ip0 % kLanes != 0 || ip1 % kLanes != 0 || ip0 >= ip1 || ip1 > md.np)
    throw InvalidInput("multimod::reduce: bad prime range");
  const slong nq = static_cast<slong>(ip1 - ip0);
  std::vector<mp_limb_t> ps(md.primes + ip0, md.primes + ip1), r(static_cast<std::size_t>(nq));
  fmpz_comb_t comb;
  fmpz_comb_temp_t temp;
  fmpz_comb_init(comb, ps.data(), nq);
  fmpz_comb_temp_init(temp, comb);
  for (std::size_t e = 0; e < count; ++e) {
    fmpz_multi_mod_ui(r.data(), values[e], comb, temp);
    for (slong i = 0; i < nq; ++i)
      out[lane_index(count, e, ip0 + static_cast<std::size_t>(i))] = static_cast<std::uint32_t>(r[static_cast<std::size_t>(i)]);
  }
  fmpz_comb_temp_clear(temp);
  fmpz_comb_clear(comb);
}

void combine(const Moduli& md, int rows, std::size_t in_cols, std::size_t out_cols, const std::int64_t* ptr,
             const std::int64_t* src, const std::int32_t* coef, const std::int64_t* values, const std::uint32_t* in,
             std::uint32_t* out) {
  check_moduli(md);
  std::int64_t nvals = 0;
  for (std::size_t o = 0; o < out_cols; ++o) {
    for (std::int64_t t = ptr[o]; t < ptr[o + 1]; ++t) {
      if (src[t] < 0 || static_cast<std::size_t>(src[t]) >= in_cols)
        throw InvalidInput("multimod::combine: source column out of range");
      nvals = std::max<std::int64_t>(nvals, coef[t] + 1);
    }
  }
  auto vm = lanes(static_cast<std::size_t>(nvals));
  Mod m;
  for (std::size_t ip0 = 0; ip0 < md.np; ip0 += kLanes) {
    set_mod(m, md.primes + ip0);
    for (std::int64_t i = 0; i < nvals; ++i) {
      alignas(64) std::uint32_t plain[W];
      for (int l = 0; l < W; ++l) {
        const std::int64_t p = m.p[l];
        std::int64_t v = values[i] % p;
        plain[l] = static_cast<std::uint32_t>(v < 0 ? v + p : v);
      }
      for (int l = 0; l < W; ++l)  // Montgomery form, scalar (few values)
        vm[static_cast<std::size_t>(i) * W + static_cast<std::size_t>(l)] =
            redc1(static_cast<std::uint64_t>(plain[l]) * m.r2[l], m.p[l], m.ninv[l]);
    }
    const std::size_t b = ip0 / kLanes;
    combine_block(rows, in_cols, out_cols, ptr, src, coef, vm.data(), in + b * rows * in_cols * W,
                  out + b * rows * out_cols * W, m);
  }
}

void gram(const Moduli& md, int rows, std::size_t cols, const std::uint32_t* m, const std::uint32_t* wres,
          std::size_t nw, const std::int32_t* widx, std::uint32_t* out) {
  check_moduli(md);
  const std::size_t rr = static_cast<std::size_t>(rows) * rows;
  if (cols == 0) {
    std::fill(out, out + rr * md.np, 0u);
    return;
  }
  if (widx)
    for (std::size_t c = 0; c < cols; ++c)
      if (widx[c] < 0 || static_cast<std::size_t>(widx[c]) >= nw)
        throw InvalidInput("multimod::gram: weight index out of range");
  auto wr2 = lanes(nw);
  auto Mm = lanes(static_cast<std::size_t>(rows) * cols);
  Mod mo;
  for (std::size_t ip0 = 0; ip0 < md.np; ip0 += kLanes) {
    set_mod(mo, md.primes + ip0);
    const std::size_t b = ip0 / kLanes;
    for (std::size_t i = 0; widx && i < nw; ++i) {
      // w R^2 = redc(redc(w r2) r2).
      std::uint32_t* dst = wr2.data() + i * W;
      for (int l = 0; l < W; ++l) {
        std::uint32_t x = wres[lane_index(nw, i, ip0 + static_cast<std::size_t>(l))];
        for (int rep = 0; rep < 2; ++rep) x = redc1(static_cast<std::uint64_t>(x) * mo.r2[l], mo.p[l], mo.ninv[l]);
        dst[l] = x;
      }
    }
    gram_block(rows, cols, m + b * static_cast<std::size_t>(rows) * cols * W, wr2.data(), widx, Mm.data(),
               out + b * rr * W, mo);
  }
}

namespace {

// Work space of berkowitz_block for one n, reused across blocks of lanes.
struct Berkowitz {
  std::size_t n;
  std::vector<std::uint32_t> Am, prev, cur, t, tm, v, vn;
  explicit Berkowitz(int size)
      : n(static_cast<std::size_t>(size)),
        Am(lanes(n * n)),
        prev(lanes(n + 1)),
        cur(lanes(n + 1)),
        t(lanes(n + 1)),
        tm(lanes(n + 1)),
        v(lanes(n)),
        vn(lanes(n)) {}
  // a: one block's n x n plain entries; out: that block's n + 1 coefficients.
  void run(const std::uint32_t* a, std::uint32_t* out, const Mod& m) {
    berkowitz_block(static_cast<int>(n), a, Am.data(), prev.data(), cur.data(), t.data(), tm.data(), v.data(),
                    vn.data(), out, m);
  }
};

}  // namespace

void charpoly(const Moduli& md, int n, const std::uint32_t* a, std::uint32_t* out) {
  check_moduli(md);
  if (n < 1) throw InvalidInput("multimod::charpoly: n must be >= 1");
  const std::size_t un = static_cast<std::size_t>(n);
  Berkowitz bk(n);
  Mod m;
  for (std::size_t ip0 = 0; ip0 < md.np; ip0 += kLanes) {
    set_mod(m, md.primes + ip0);
    const std::size_t b = ip0 / kLanes;
    bk.run(a + b * un * un * W, out + b * (un + 1) * W, m);
  }
}

void charpoly_of_product(const Moduli& md, int n, const std::uint32_t* z, const std::uint32_t* x,
                         std::uint32_t* out) {
  check_moduli(md);
  if (n < 1) throw InvalidInput("multimod::charpoly_of_product: n must be >= 1");
  const std::size_t un = static_cast<std::size_t>(n);
  auto Zm = lanes(un * un), P = lanes(un * un);
  Berkowitz bk(n);
  Mod m;
  for (std::size_t ip0 = 0; ip0 < md.np; ip0 += kLanes) {
    set_mod(m, md.primes + ip0);
    const std::size_t b = ip0 / kLanes;
    product_block(n, z + b * un * un * W, x + b * un * un * W, Zm.data(), P.data(), m);
    bk.run(P.data(), out + b * (un + 1) * W, m);
  }
}

}  // namespace toral::multimod

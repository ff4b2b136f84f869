// Tests of the multi-modular lane arithmetic (kernels/multimod.hpp). Built
// twice: against the kernels library (the best target clone of the lane
// kernels for this CPU; run a second time under valgrind, which hides
// AVX-512 and so selects the AVX2 clone) and with multimod.cpp compiled
// without clones for the baseline ISA (test_multimod_baseline).
#include <gtest/gtest.h>

#include <flint/fmpz.h>
#include <flint/nmod_mat.h>
#include <flint/nmod_poly.h>

#include <cstdint>
#include <random>
#include <stdexcept>
#include <vector>

#include "multimod.hpp"

using namespace toral;

// ---- Multi-modular lane arithmetic (multimod.hpp), checked against FLINT
// (a general-purpose reference library: nmod_mat_charpoly, fmpz_fdiv_ui)
// and 128-bit scalar arithmetic on the same values, with two lane blocks,
// a stride above np, sizes above one 16-term reduction chunk, residues at
// the extremes 0 and p - 1, and negative and large coefficients.

namespace {

struct LaneFixture {
  std::vector<std::uint64_t> primes;
  multimod::Moduli md;
  std::mt19937_64 rng{20261202};
  LaneFixture() {
    multimod::extend_primes(primes, 2 * multimod::kLanes);
    md.primes = primes.data();
    md.np = primes.size();
  }
  std::vector<std::uint32_t> random_lanes(std::size_t entries) {
    std::vector<std::uint32_t> a(entries * md.np, 0);
    for (std::size_t e = 0; e < entries; ++e)
      for (std::size_t ip = 0; ip < md.np; ++ip) {
        const std::uint64_t p = primes[ip], r = rng() % 6;
        a[multimod::lane_index(entries, e, ip)] = static_cast<std::uint32_t>(r == 0 ? p - 1 : r == 1 ? 0 : rng() % p);
      }
    return a;
  }
  // Entry e of a lane array of E entries, for prime ip.
  static std::uint64_t at(const std::vector<std::uint32_t>& a, std::size_t E, std::size_t e, std::size_t ip) {
    return a[multimod::lane_index(E, e, ip)];
  }
};

std::vector<std::uint64_t> flint_charpoly_mod(const std::vector<std::uint64_t>& a, int n, std::uint64_t p) {
  nmod_mat_t A;
  nmod_mat_init(A, n, n, p);
  for (int i = 0; i < n; ++i)
    for (int j = 0; j < n; ++j) nmod_mat_entry(A, i, j) = a[static_cast<std::size_t>(i * n + j)];
  nmod_poly_t cp;
  nmod_poly_init(cp, p);
  nmod_mat_charpoly(cp, A);
  std::vector<std::uint64_t> c(static_cast<std::size_t>(n + 1));
  for (int i = 0; i <= n; ++i) c[static_cast<std::size_t>(i)] = nmod_poly_get_coeff_ui(cp, i);
  nmod_poly_clear(cp);
  nmod_mat_clear(A);
  return c;
}

}  // namespace

TEST(Multimod, CharpolyMatchesFlint) {
  LaneFixture f;
  for (const int n : {1, 2, 3, 7, 16, 17, 34}) {
    const std::size_t nn = static_cast<std::size_t>(n) * n, nn1 = static_cast<std::size_t>(n) + 1;
    const auto a = f.random_lanes(nn), z = f.random_lanes(nn), x = f.random_lanes(nn);
    std::vector<std::uint32_t> out((static_cast<std::size_t>(n) + 1) * f.md.np), outp(out.size());
    multimod::charpoly(f.md, n, a.data(), out.data());
    multimod::charpoly_of_product(f.md, n, z.data(), x.data(), outp.data());
    for (std::size_t ip = 0; ip < f.md.np; ++ip) {
      const std::uint64_t p = f.primes[ip];
      std::vector<std::uint64_t> ai(nn), zx(nn, 0);
      for (std::size_t e = 0; e < nn; ++e) ai[e] = f.at(a, nn, e, ip);
      for (int i = 0; i < n; ++i)
        for (int j = 0; j < n; ++j) {
          unsigned __int128 s = 0;
          for (int l = 0; l < n; ++l)
            s += static_cast<unsigned __int128>(f.at(z, nn, static_cast<std::size_t>(i * n + l), ip)) *
                 f.at(x, nn, static_cast<std::size_t>(l * n + j), ip);
          zx[static_cast<std::size_t>(i * n + j)] = static_cast<std::uint64_t>(s % p);
        }
      const auto ref = flint_charpoly_mod(ai, n, p), refp = flint_charpoly_mod(zx, n, p);
      for (int c = 0; c <= n; ++c) {
        ASSERT_EQ(f.at(out, nn1, static_cast<std::size_t>(c), ip), ref[static_cast<std::size_t>(c)])
            << "n = " << n << ", prime " << p << ", x^" << c;
        ASSERT_EQ(f.at(outp, nn1, static_cast<std::size_t>(c), ip), refp[static_cast<std::size_t>(c)])
            << "product, n = " << n << ", prime " << p << ", x^" << c;
      }
    }
  }
}

TEST(Multimod, CombineGramAndReduceMatchScalarArithmetic) {
  LaneFixture f;
  const int rows = 5;
  const std::size_t in_cols = 23, out_cols = 19;
  const std::vector<std::int64_t> values = {1, -1, 3, -7, (std::int64_t{1} << 40) + 5, -(std::int64_t{1} << 61)};
  std::vector<std::int64_t> ptr = {0}, src;
  std::vector<std::int32_t> coef;
  for (std::size_t o = 0; o < out_cols; ++o) {
    const std::size_t nt = o == 3 ? 0 : o == 4 ? 40 : 1 + f.rng() % 5;  // empty, multi-chunk, typical
    for (std::size_t t = 0; t < nt; ++t) {
      src.push_back(static_cast<std::int64_t>(f.rng() % in_cols));
      coef.push_back(static_cast<std::int32_t>(f.rng() % values.size()));
    }
    ptr.push_back(static_cast<std::int64_t>(src.size()));
  }
  const auto in = f.random_lanes(rows * in_cols);
  std::vector<std::uint32_t> out(rows * out_cols * f.md.np);
  multimod::combine(f.md, rows, in_cols, out_cols, ptr.data(), src.data(), coef.data(), values.data(), in.data(),
                    out.data());
  // Gram of `in` with weights drawn from three fmpz values, one above 2^64.
  fmpz_t w[3];
  for (auto& x : w) fmpz_init(x);
  fmpz_set_si(w[0], 1);
  fmpz_set_si(w[1], 12345);
  fmpz_set_str(w[2], "987654321987654321987654321", 10);
  const fmpz* wp[3] = {w[0], w[1], w[2]};
  std::vector<std::uint32_t> wres(3 * f.md.np);
  multimod::reduce(f.md, 0, f.md.np, wp, 3, wres.data());
  std::vector<std::int32_t> widx(in_cols);
  for (auto& x : widx) x = static_cast<std::int32_t>(f.rng() % 3);
  std::vector<std::uint32_t> g(rows * rows * f.md.np), g1(g.size());
  multimod::gram(f.md, rows, in_cols, in.data(), wres.data(), 3, widx.data(), g.data());
  multimod::gram(f.md, rows, in_cols, in.data(), nullptr, 0, nullptr, g1.data());
  for (std::size_t ip = 0; ip < f.md.np; ++ip) {
    const std::uint64_t p = f.primes[ip];
    std::uint64_t wm[3];
    for (int i = 0; i < 3; ++i) {
      wm[i] = fmpz_fdiv_ui(w[i], p);
      ASSERT_EQ(f.at(wres, 3, static_cast<std::size_t>(i), ip), wm[i]);
    }
    for (int r = 0; r < rows; ++r)
      for (std::size_t o = 0; o < out_cols; ++o) {
        __int128 s = 0;
        for (std::int64_t t = ptr[o]; t < ptr[o + 1]; ++t)
          s += static_cast<__int128>(values[static_cast<std::size_t>(coef[static_cast<std::size_t>(t)])] %
                                     static_cast<std::int64_t>(p)) *
               static_cast<__int128>(
                   f.at(in, rows * in_cols, r * in_cols + static_cast<std::size_t>(src[static_cast<std::size_t>(t)]), ip));
        s %= static_cast<__int128>(p);
        if (s < 0) s += p;
        ASSERT_EQ(f.at(out, rows * out_cols, r * out_cols + o, ip), static_cast<std::uint64_t>(s))
            << "combine r " << r << " o " << o;
      }
    for (int a = 0; a < rows; ++a)
      for (int b = 0; b < rows; ++b) {
        unsigned __int128 s = 0, s1 = 0;
        for (std::size_t c = 0; c < in_cols; ++c) {
          const unsigned __int128 prod = static_cast<unsigned __int128>(f.at(in, rows * in_cols, a * in_cols + c, ip)) *
                                         f.at(in, rows * in_cols, b * in_cols + c, ip) % p;
          s += prod * wm[widx[c]] % p;
          s1 += prod;
        }
        ASSERT_EQ(f.at(g, rows * rows, static_cast<std::size_t>(a * rows + b), ip), static_cast<std::uint64_t>(s % p));
        ASSERT_EQ(f.at(g1, rows * rows, static_cast<std::size_t>(a * rows + b), ip), static_cast<std::uint64_t>(s1 % p));
      }
  }
  for (auto& x : w) fmpz_clear(x);
}

TEST(Multimod, RejectsBadModuli) {
  const std::uint64_t bad[multimod::kLanes] = {(std::uint64_t{1} << 28) + 3};
  const std::uint32_t e[multimod::kLanes] = {1};
  std::uint32_t out[2 * multimod::kLanes];
  multimod::Moduli md{bad, multimod::kLanes};
  EXPECT_THROW(multimod::charpoly(md, 1, e, out), std::invalid_argument);
  multimod::Moduli partial{bad, 5};
  EXPECT_THROW(multimod::charpoly(partial, 1, e, out), std::invalid_argument);
}

// Multi-modular integer linear algebra for the exact kernels: residues of
// small integer matrices modulo many word primes at once, to be put back
// together by the Chinese remainder theorem.
//
// The primes are 28-bit (2^27 < p < 2^28) so that Montgomery arithmetic with
// R = 2^32 lets up to 16 products of residues be summed in 64 bits before
// one reduction (16 p^2 < p 2^32). kLanes primes are processed side by side
// in vector lanes (the same operations on independent moduli); on x86-64 the
// kernels are compiled for AVX-512, AVX2 and the baseline and pick the best
// at run time (elsewhere once, for the target). The characteristic polynomial uses the division-free Berkowitz
// algorithm, so no pivot can vanish for one prime and not for another.
//
// Layout: a "lane array" of E entries for primes ip = 0 .. np-1 (np a
// positive multiple of kLanes) is stored block by block, each block of
// kLanes consecutive primes holding its E entries one after another with
// kLanes residues each: the residue of entry e modulo primes[ip] (uint32,
// < primes[ip]) is at lane_index(E, e, ip). A block's data is contiguous, so
// more primes are more blocks appended at the end.
//
// References (tested): FLINT's nmod_mat_charpoly, nmod_mat_mul and
// fmpz_fdiv_ui on the same values.
#pragma once
#include <flint/fmpz.h>

#include <cstddef>
#include <cstdint>
#include <vector>

namespace toral::multimod {

inline constexpr std::uint64_t kPrimeMax = std::uint64_t{1} << 28;  // exclusive
inline constexpr std::uint64_t kPrimeMin = std::uint64_t{1} << 27;  // exclusive
inline constexpr std::size_t kLanes = 32;
inline constexpr int kPrimeBits = 27;  // every prime exceeds 2^27

// Extends `primes` in place to the first `count` primes above 2^27
// (ascending, deterministic, proven prime).
void extend_primes(std::vector<std::uint64_t>& primes, std::size_t count);

inline std::size_t lane_index(std::size_t entries, std::size_t e, std::size_t ip) {
  return (ip / kLanes) * entries * kLanes + e * kLanes + ip % kLanes;
}

struct Moduli {
  const std::uint64_t* primes = nullptr;  // np entries, each in (kPrimeMin, kPrimeMax)
  std::size_t np = 0;                     // a positive multiple of kLanes
};

// Residues of the integers values[0..count) for primes ip in [ip0, ip1)
// (both multiples of kLanes), into the lane array `out` of count entries.
void reduce(const Moduli& md, std::size_t ip0, std::size_t ip1, const fmpz* const* values, std::size_t count,
            std::uint32_t* out);

// Column combination of a rows x in_cols matrix `in` (entry (r, c) at index
// r * in_cols + c) into a rows x out_cols matrix `out`: for every row r,
//   out(r, o) = sum_{t in [ptr[o], ptr[o+1])} values[coef[t]] * in(r, src[t]),
// with signed coefficients values[] (any int64).
void combine(const Moduli& md, int rows, std::size_t in_cols, std::size_t out_cols, const std::int64_t* ptr,
             const std::int64_t* src, const std::int32_t* coef, const std::int64_t* values, const std::uint32_t* in,
             std::uint32_t* out);

// Weighted Gram matrix of the rows of m (rows x cols, entry (r, c) at
// r * cols + c): out(a, b) = sum_c w_c m(a, c) m(b, c) at index a * rows + b
// (both triangles). w_c = 1 when widx is null, otherwise w_c is entry
// widx[c] of the lane array wres of nw entries.
void gram(const Moduli& md, int rows, std::size_t cols, const std::uint32_t* m, const std::uint32_t* wres,
          std::size_t nw, const std::int32_t* widx, std::uint32_t* out);

// det(x I - A) of the n x n matrix A (entry (i, j) at i * n + j): out entry c
// is the coefficient of x^c, c = 0..n (the x^n one is 1).
void charpoly(const Moduli& md, int n, const std::uint32_t* a, std::uint32_t* out);

// The same for A = Z X, Z and X n x n as above.
void charpoly_of_product(const Moduli& md, int n, const std::uint32_t* z, const std::uint32_t* x,
                         std::uint32_t* out);

}  // namespace toral::multimod

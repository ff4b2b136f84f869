// Exact integer matrices with overflow detection. Nothing here wraps: every
// product and sum goes through the checked helpers and throws OverflowError.
#pragma once
#include <array>
#include <cstdint>
#include <stdexcept>
#include <string>
#include <vector>

#include "errors.hpp"

namespace toral {

// OverflowError: kernels/errors.hpp.

inline std::int64_t checked_add(std::int64_t a, std::int64_t b, const char* what = "sum") {
  std::int64_t r;
  if (__builtin_add_overflow(a, b, &r))
    throw OverflowError(std::string("int64 overflow in ") + what);
  return r;
}

inline std::int64_t checked_mul(std::int64_t a, std::int64_t b, const char* what = "product") {
  std::int64_t r;
  if (__builtin_mul_overflow(a, b, &r))
    throw OverflowError(std::string("int64 overflow in ") + what);
  return r;
}

// Small square integer matrix of fixed size n (2 or 4 in practice).
template <int n>
struct IntSq {
  std::array<std::int64_t, n * n> a{};
  std::int64_t& operator()(int i, int j) { return a[i * n + j]; }
  std::int64_t operator()(int i, int j) const { return a[i * n + j]; }
  bool operator==(const IntSq& o) const { return a == o.a; }
  bool operator!=(const IntSq& o) const { return a != o.a; }
  static IntSq identity() {
    IntSq m;
    for (int i = 0; i < n; ++i) m(i, i) = 1;
    return m;
  }
};

using Mat2 = IntSq<2>;
using Mat4 = IntSq<4>;

template <int n>
IntSq<n> checked_matmul(const IntSq<n>& x, const IntSq<n>& y) {
  IntSq<n> r;
  for (int i = 0; i < n; ++i)
    for (int j = 0; j < n; ++j) {
      std::int64_t s = 0;
      for (int k = 0; k < n; ++k) s = checked_add(s, checked_mul(x(i, k), y(k, j)));
      r(i, j) = s;
    }
  return r;
}

template <int n>
IntSq<n> transpose(const IntSq<n>& x) {
  IntSq<n> r;
  for (int i = 0; i < n; ++i)
    for (int j = 0; j < n; ++j) r(i, j) = x(j, i);
  return r;
}

inline std::int64_t det2(const Mat2& m) {
  return checked_add(checked_mul(m(0, 0), m(1, 1)), -checked_mul(m(0, 1), m(1, 0)), "determinant");
}

// Inverse transpose of a 2x2 integer matrix with det = +-1 (exact, integer).
Mat2 inverse_transpose(const Mat2& m);

// Embedding of a position-class gate A (acting on (q_a, q_b), momenta by A^-T)
// as a 4x4 matrix on the interleaved local coordinates (q_a, p_a, q_b, p_b).
Mat4 embed_position_gate(const Mat2& A);

// The local symplectic form on (q_a, p_a, q_b, p_b): J = diag([[0,1],[-1,0]] x2).
Mat4 local_form4();

// True when G^T J G = J for the local form above (exact integers).
bool is_symplectic4(const Mat4& G);

std::string to_string(const Mat2& m);
std::string to_string(const Mat4& m);

}  // namespace toral

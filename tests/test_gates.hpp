// Small integer gate builders shared by the C++ test suites (tests only).
#pragma once
#include <cstdint>

#include "intmat.hpp"

namespace toral::testgates {

// [[a, b], [c, d]].
inline Mat2 m2(std::int64_t a, std::int64_t b, std::int64_t c, std::int64_t d) {
  Mat2 m;
  m(0, 0) = a;
  m(0, 1) = b;
  m(1, 0) = c;
  m(1, 1) = d;
  return m;
}

// Two-shear gate [[1,a],[0,1]] [[1,0],[b,1]] = [[1+ab, a], [b, 1]] (det 1; docs/model.md).
inline Mat2 two_shear(std::int64_t a, std::int64_t b) { return checked_matmul(m2(1, a, 0, 1), m2(1, 0, b, 1)); }

// blockdiag(s, t) on (q_a, p_a), (q_b, p_b): two one-site maps as one bond gate.
inline Mat4 local_pair(const Mat2& s, const Mat2& t) {
  Mat4 G;
  for (int i = 0; i < 2; ++i)
    for (int j = 0; j < 2; ++j) {
      G(i, j) = s(i, j);
      G(2 + i, 2 + j) = t(i, j);
    }
  return G;
}

// The coupling p_a += q_b, p_b += q_a on (q_a, p_a, q_b, p_b) (symplectic: a
// shear by the symmetric form q_a q_b).
inline Mat4 coupling() {
  Mat4 C = Mat4::identity();
  C(1, 2) = 1;
  C(3, 0) = 1;
  return C;
}

// One of four elementary symplectic shears on (q_a, p_a, q_b, p_b) with
// coefficient c, which = 0..3: q_a += c p_a; p_a += c q_a; q_a += c p_b and
// q_b += c p_a; p_a += c q_b and p_b += c q_a. Together they generate
// Sp(4, Z) (common practice); the suites draw random products of them.
inline Mat4 elementary_shear4(int which, std::int64_t c) {
  Mat4 E = Mat4::identity();
  switch (which) {
    case 0: E(0, 1) = c; break;
    case 1: E(1, 0) = c; break;
    case 2: E(0, 3) = c; E(2, 1) = c; break;
    default: E(1, 2) = c; E(3, 0) = c; break;
  }
  return E;
}

}  // namespace toral::testgates

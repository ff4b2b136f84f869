#include "intmat.hpp"
#include "errors.hpp"

#include <sstream>

namespace toral {

Mat2 inverse_transpose(const Mat2& m) {
  const std::int64_t d = det2(m);
  if (d != 1 && d != -1) throw InvalidInput("inverse_transpose needs det = +-1");
  // A^-1 = (1/d) [[m11, -m01], [-m10, m00]]; transpose it.
  Mat2 r;
  r(0, 0) = d * m(1, 1);
  r(0, 1) = -d * m(1, 0);
  r(1, 0) = -d * m(0, 1);
  r(1, 1) = d * m(0, 0);
  return r;
}

Mat4 embed_position_gate(const Mat2& A) {
  const Mat2 B = inverse_transpose(A);
  Mat4 G;  // coordinates (q_a, p_a, q_b, p_b): q indices 0,2 and p indices 1,3
  const int qi[2] = {0, 2}, pi[2] = {1, 3};
  for (int i = 0; i < 2; ++i)
    for (int j = 0; j < 2; ++j) {
      G(qi[i], qi[j]) = A(i, j);
      G(pi[i], pi[j]) = B(i, j);
    }
  return G;
}

Mat4 local_form4() {
  Mat4 J;
  J(0, 1) = 1;
  J(1, 0) = -1;
  J(2, 3) = 1;
  J(3, 2) = -1;
  return J;
}

bool is_symplectic4(const Mat4& G) {
  const Mat4 J = local_form4();
  return checked_matmul(checked_matmul(transpose(G), J), G) == J;
}

namespace {
template <int n>
std::string fmt(const IntSq<n>& m) {
  std::ostringstream os;
  os << '[';
  for (int i = 0; i < n; ++i) {
    os << (i ? ",[" : "[");
    for (int j = 0; j < n; ++j) os << (j ? "," : "") << m(i, j);
    os << ']';
  }
  os << ']';
  return os.str();
}
}  // namespace

std::string to_string(const Mat2& m) { return fmt(m); }
std::string to_string(const Mat4& m) { return fmt(m); }

}  // namespace toral

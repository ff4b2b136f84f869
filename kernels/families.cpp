#include "families.hpp"
#include "errors.hpp"

#include "fnv1a.hpp"

#include <Random123/philox.h>

#include <limits>
#include <stdexcept>

namespace toral {

const std::vector<Family>& families() {
  static const std::vector<Family> f = {
      {"shear2", {"a", "b"}, "[[1,a],[0,1]]*[[1,0],[b,1]] = [[1+a*b, a], [b, 1]]"},
      {"cat", {"a", "b"}, "[[a, 1], [a*b-1, b]]"},
  };
  return f;
}

const Family* find_family(const std::string& name) {
  for (const auto& f : families())
    if (f.name == name) return &f;
  return nullptr;
}

Mat2 family_matrix(const std::string& name, const std::vector<std::int64_t>& v) {
  if (v.size() != 2) throw InvalidInput("family " + name + " takes 2 parameters");
  const std::int64_t a = v[0], b = v[1];
  Mat2 m;
  const std::int64_t ab1 = checked_add(checked_mul(a, b, "family parameters"), 1, "family parameters");
  if (name == "shear2") {
    m(0, 0) = ab1;
    m(0, 1) = a;
    m(1, 0) = b;
    m(1, 1) = 1;
  } else if (name == "cat") {
    m(0, 0) = a;
    m(0, 1) = 1;
    m(1, 0) = ab1 - 2;
    m(1, 1) = b;
  } else {
    throw InvalidInput("unknown family " + name);
  }
  return m;
}

std::int64_t draw_uniform(std::uint64_t seed, std::uint64_t point_key, std::uint64_t slot,
                          std::uint64_t index, std::uint64_t tag, std::int64_t lo, std::int64_t hi) {
  if (hi < lo) throw InvalidInput("draw_uniform: empty range");
  const std::uint64_t range = static_cast<std::uint64_t>(hi) - static_cast<std::uint64_t>(lo) + 1;
  using G = r123::Philox4x64;
  G gen;
  G::key_type key = {{seed, point_key}};
  // Rejection sampling removes the modulo bias; the attempt number is part of
  // the counter so a rejection never shifts another draw.
  for (std::uint64_t attempt = 0;; ++attempt) {
    G::ctr_type ctr = {{slot, index, tag, attempt}};
    const G::ctr_type out = gen(ctr, key);
    for (int k = 0; k < 4; ++k) {
      const std::uint64_t x = out.v[k];
      if (range == 0) return static_cast<std::int64_t>(x);  // full 64-bit range
      const std::uint64_t limit = std::numeric_limits<std::uint64_t>::max() -
                                  std::numeric_limits<std::uint64_t>::max() % range;
      if (x < limit) return static_cast<std::int64_t>(static_cast<std::uint64_t>(lo) + x % range);
    }
  }
}

std::uint64_t fnv1a64(const std::string& s) { return fnv1a64_bytes(s.data(), s.size()); }

}  // namespace toral

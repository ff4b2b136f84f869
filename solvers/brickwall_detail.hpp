// Internal helpers shared by assemble.cpp and layers.cpp (not part of the API).
#pragma once
#include <cstdint>
#include <string>

#include "assemble.hpp"

namespace toral::detail {

// Bond of layer `parity` (0 even, 1 odd) touching site i: bond index b and
// the local position li of i in it (bond b joins (b, b+1 mod L)). False when
// that layer leaves site i alone (the ends of an open chain).
inline bool bond_of(std::int64_t L, bool periodic, std::int64_t nb, std::int64_t i, int parity,
                    std::int64_t& b, int& li) {
  if ((i & 1) == parity && i < nb) {
    b = i;
    li = 0;
    return true;
  }
  std::int64_t j = i - 1;
  if (j < 0) {
    if (!periodic) return false;
    j += L;
  }
  if ((j & 1) == parity && j < nb) {
    b = j;
    li = 1;
    return true;
  }
  return false;
}

inline std::string gate_where(std::int64_t b, std::int64_t t) {
  return "bond " + std::to_string(b) + " (period " + std::to_string(t) + ")";
}

// The validated 2x2 gate of bond b as it enters the site-ordered operator op
// (M: A, M^-1: A^-1, M^-T: A^-T). Throws ModelError for a symplectic gate.
inline Mat2 gate2(const GateSource& g, std::int64_t b, std::int64_t t, Operator op) {
  const BondGate bg = g.bond(b, t);
  if (bg.kind != BondKind::Position)
    throw ModelError(gate_where(b, t) + ": symplectic gate in a position-class circuit; the " +
                     std::string(operator_name(op)) + " block needs position gates (use Operator::S)");
  validate_position_gate(bg.A, gate_where(b, t));
  switch (op) {
    case Operator::M: return bg.A;
    case Operator::MInverse: return transpose(inverse_transpose(bg.A));
    case Operator::MInverseT: return inverse_transpose(bg.A);
    default: throw std::logic_error("gate2: not a site-ordered operator");
  }
}

// The validated 4x4 gate of bond b on (q_a, p_a, q_b, p_b), as S uses it.
inline Mat4 gate4(const GateSource& g, std::int64_t b, std::int64_t t) {
  const BondGate bg = g.bond(b, t);
  if (bg.kind == BondKind::Position) {
    validate_position_gate(bg.A, gate_where(b, t));
    if (!(embed_position_gate(bg.A) == bg.G))
      throw ModelError(gate_where(b, t) + ": position gate " + to_string(bg.A) +
                       " does not match its 4x4 embedding " + to_string(bg.G));
  } else {
    validate_symplectic_gate(bg.G, gate_where(b, t));
  }
  return bg.G;
}

// The validated one-site gate of site i.
inline Mat2 site_gate(const GateSource& g, std::int64_t i, std::int64_t t) {
  const Mat2 m = g.site(i, t);
  validate_site_gate(m, "site " + std::to_string(i) + " (period " + std::to_string(t) + ")");
  return m;
}

}  // namespace toral::detail

#include "model.hpp"

#include <algorithm>
#include <map>

namespace toral {

const char* boundary_name(Boundary b) { return b == Boundary::Periodic ? "periodic" : "open"; }

BondGate BondGate::position(const Mat2& A) {
  BondGate g;
  g.kind = BondKind::Position;
  g.A = A;
  // An invalid A (det != +-1) keeps G = identity; Circuit::validate rejects it.
  if (det2(A) == 1 || det2(A) == -1) g.G = embed_position_gate(A);
  return g;
}

BondGate BondGate::symplectic(const Mat4& G) {
  BondGate g;
  g.kind = BondKind::Symplectic;
  g.G = G;
  return g;
}

void validate_position_gate(const Mat2& A, const std::string& where) {
  std::int64_t d;
  try {
    d = det2(A);
  } catch (const OverflowError&) {
    throw ModelError(where + ": determinant of " + to_string(A) + " overflows int64");
  }
  if (d != 1 && d != -1)
    throw ModelError(where + ": position gate " + to_string(A) + " has det " + std::to_string(d) +
                     ", needs det = +1 or -1");
}

void validate_symplectic_gate(const Mat4& G, const std::string& where) {
  bool ok;
  try {
    ok = is_symplectic4(G);
  } catch (const OverflowError&) {
    throw ModelError(where + ": symplectic check of " + to_string(G) + " overflows int64");
  }
  if (!ok)
    throw ModelError(where + ": gate " + to_string(G) +
                     " is not symplectic (G^T J G != J on (q_a,p_a,q_b,p_b))");
}

void validate_site_gate(const Mat2& g, const std::string& where) {
  std::int64_t d;
  try {
    d = det2(g);
  } catch (const OverflowError&) {
    throw ModelError(where + ": determinant of " + to_string(g) + " overflows int64");
  }
  if (d != 1)
    throw ModelError(where + ": one-site gate " + to_string(g) + " has det " + std::to_string(d) +
                     ", needs det = 1");
}

bool Circuit::position_class() const {
  if (has_site_layer()) return false;
  return std::all_of(bonds.begin(), bonds.end(),
                     [](const BondGate& b) { return b.kind == BondKind::Position; });
}

bool Circuit::translation_invariant() const {
  for (std::size_t b = 1; b < bonds.size(); ++b)
    if (!(bonds[b] == bonds[0])) return false;
  for (std::size_t i = 1; i < sites.size(); ++i)
    if (sites[i] != sites[0]) return false;
  return true;
}

void Circuit::validate() const {
  if (L < 2) throw ModelError("lattice: L = " + std::to_string(L) + ", needs at least 2 sites");
  if (boundary == Boundary::Periodic && L % 2 != 0)
    throw ModelError("lattice: L = " + std::to_string(L) +
                     " is odd; a periodic brick-wall needs even L");
  if (static_cast<std::int64_t>(bonds.size()) != bond_count())
    throw ModelError("lattice: " + std::to_string(bonds.size()) + " bond gates for " +
                     std::to_string(bond_count()) + " bonds");
  if (!sites.empty() && static_cast<std::int64_t>(sites.size()) != L)
    throw ModelError("lattice: " + std::to_string(sites.size()) + " site gates for L = " +
                     std::to_string(L));
  for (std::size_t b = 0; b < bonds.size(); ++b) {
    const std::string where = "bond " + std::to_string(b);
    if (bonds[b].kind == BondKind::Position)
      validate_position_gate(bonds[b].A, where);
    else
      validate_symplectic_gate(bonds[b].G, where);
  }
  for (std::size_t i = 0; i < sites.size(); ++i) validate_site_gate(sites[i], "site " + std::to_string(i));
}

Circuit materialize(const GateSource& g, std::int64_t t) {
  Circuit c;
  c.L = g.L;
  c.boundary = g.boundary;
  c.bonds.reserve(static_cast<std::size_t>(g.bond_count()));
  for (std::int64_t b = 0; b < g.bond_count(); ++b) c.bonds.push_back(g.bond(b, t));
  if (g.has_site_layer) {
    c.sites.reserve(static_cast<std::size_t>(g.L));
    for (std::int64_t i = 0; i < g.L; ++i) c.sites.push_back(g.site(i, t));
  }
  return c;
}

std::int64_t SparseInt::at(std::int64_t i, std::int64_t j) const {
  for (std::int64_t k = rowptr[i]; k < rowptr[i + 1]; ++k)
    if (col[k] == j) return val[k];
  return 0;
}

std::vector<double> SparseInt::dense() const {
  std::vector<double> d(static_cast<std::size_t>(n * n), 0.0);
  for (std::int64_t i = 0; i < n; ++i)
    for (std::int64_t k = rowptr[i]; k < rowptr[i + 1]; ++k)
      d[static_cast<std::size_t>(i * n + col[k])] = static_cast<double>(val[k]);
  return d;
}

SparseInt checked_product(const SparseInt& x, const SparseInt& y) {
  SparseInt r;
  r.n = x.n;
  r.rowptr.assign(1, 0);
  r.rowptr.reserve(static_cast<std::size_t>(x.n) + 1);
  std::map<std::int64_t, std::int64_t> acc;
  for (std::int64_t i = 0; i < x.n; ++i) {
    acc.clear();
    for (std::int64_t k = x.rowptr[i]; k < x.rowptr[i + 1]; ++k) {
      const std::int64_t m = x.col[k];
      for (std::int64_t l = y.rowptr[m]; l < y.rowptr[m + 1]; ++l) {
        auto& e = acc[y.col[l]];
        e = checked_add(e, checked_mul(x.val[k], y.val[l], "matrix product"), "matrix product");
      }
    }
    for (const auto& [j, v] : acc)
      if (v != 0) {
        r.col.push_back(j);
        r.val.push_back(v);
      }
    r.rowptr.push_back(static_cast<std::int64_t>(r.col.size()));
  }
  return r;
}

namespace {

// Builds a sparse matrix from per-row maps.
SparseInt from_rows(std::vector<std::map<std::int64_t, std::int64_t>>& rows) {
  SparseInt r;
  r.n = static_cast<std::int64_t>(rows.size());
  r.rowptr.assign(1, 0);
  for (auto& row : rows) {
    for (const auto& [j, v] : row)
      if (v != 0) {
        r.col.push_back(j);
        r.val.push_back(v);
      }
    r.rowptr.push_back(static_cast<std::int64_t>(r.col.size()));
  }
  return r;
}

// One layer of bond gates (parity 0 = even bonds, 1 = odd bonds) on 2L coords.
SparseInt bond_layer(const Circuit& c, int parity) {
  const std::int64_t L = c.L;
  std::vector<std::map<std::int64_t, std::int64_t>> rows(static_cast<std::size_t>(2 * L));
  std::vector<bool> touched(static_cast<std::size_t>(L), false);
  for (std::int64_t b = parity; b < c.bond_count(); b += 2) {
    const std::int64_t s[2] = {b, (b + 1) % L};
    // local index 2*k + 0 -> q of site s[k], 2*k + 1 -> p of site s[k]
    auto glob = [&](int loc) { return (loc % 2 == 0 ? 0 : L) + s[loc / 2]; };
    const Mat4& G = c.bonds[static_cast<std::size_t>(b)].G;
    for (int i = 0; i < 4; ++i)
      for (int j = 0; j < 4; ++j)
        if (G(i, j) != 0) rows[static_cast<std::size_t>(glob(i))][glob(j)] = G(i, j);
    touched[static_cast<std::size_t>(s[0])] = touched[static_cast<std::size_t>(s[1])] = true;
  }
  for (std::int64_t i = 0; i < L; ++i)
    if (!touched[static_cast<std::size_t>(i)]) {
      rows[static_cast<std::size_t>(i)][i] = 1;
      rows[static_cast<std::size_t>(L + i)][L + i] = 1;
    }
  return from_rows(rows);
}

SparseInt site_layer(const Circuit& c) {
  const std::int64_t L = c.L;
  std::vector<std::map<std::int64_t, std::int64_t>> rows(static_cast<std::size_t>(2 * L));
  for (std::int64_t i = 0; i < L; ++i) {
    const Mat2& g = c.sites[static_cast<std::size_t>(i)];
    const std::int64_t idx[2] = {i, L + i};
    for (int a = 0; a < 2; ++a)
      for (int b = 0; b < 2; ++b)
        if (g(a, b) != 0) rows[static_cast<std::size_t>(idx[a])][idx[b]] = g(a, b);
  }
  return from_rows(rows);
}

}  // namespace

SparseInt assemble_period(const Circuit& c) {
  c.validate();
  SparseInt S = checked_product(bond_layer(c, 1), bond_layer(c, 0));
  if (c.has_site_layer()) S = checked_product(site_layer(c), S);
  return S;
}

SparseInt assemble_position_block(const Circuit& c) {
  c.validate();
  if (!c.position_class()) throw ModelError("circuit is not position-class: no M block");
  const std::int64_t L = c.L;
  auto layer = [&](int parity) {
    std::vector<std::map<std::int64_t, std::int64_t>> rows(static_cast<std::size_t>(L));
    std::vector<bool> touched(static_cast<std::size_t>(L), false);
    for (std::int64_t b = parity; b < c.bond_count(); b += 2) {
      const std::int64_t s[2] = {b, (b + 1) % L};
      const Mat2& A = c.bonds[static_cast<std::size_t>(b)].A;
      for (int i = 0; i < 2; ++i)
        for (int j = 0; j < 2; ++j)
          if (A(i, j) != 0) rows[static_cast<std::size_t>(s[i])][s[j]] = A(i, j);
      touched[static_cast<std::size_t>(s[0])] = touched[static_cast<std::size_t>(s[1])] = true;
    }
    for (std::int64_t i = 0; i < L; ++i)
      if (!touched[static_cast<std::size_t>(i)]) rows[static_cast<std::size_t>(i)][i] = 1;
    return from_rows(rows);
  };
  return checked_product(layer(1), layer(0));
}

}  // namespace toral

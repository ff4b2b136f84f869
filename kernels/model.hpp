// The lattice model: a brick-wall circuit of integer symplectic gates on L
// sites, one (q, p) pair per site, and its one-period matrix S in Sp(2L, Z).
//
// Global coordinate order: (q_0, ..., q_{L-1}, p_0, ..., p_{L-1}), so that
// J = [[0, I], [-I, 0]] and a position-class circuit has S = M (+) M^-T.
// Local gate coordinates are interleaved: (q_a, p_a, q_b, p_b) for a bond
// (a, b) and (q_i, p_i) for a site; the local form is diag([[0,1],[-1,0]]).
//
// Bond b joins sites (b, b+1 mod L): L bonds on a periodic ring, L-1 on an
// open chain. One period applies the even bonds, then the odd bonds, then
// (optionally) the layer of one-site gates: S = S_site * S_odd * S_even.
#pragma once
#include <cstdint>
#include <functional>
#include <stdexcept>
#include <string>
#include <vector>

#include "intmat.hpp"

namespace toral {

enum class Boundary { Periodic = 0, Open = 1 };
const char* boundary_name(Boundary b);

enum class BondKind { Position = 0, Symplectic = 1 };

// A two-site gate. For Position gates `A` is the 2x2 matrix on (q_a, q_b);
// `G` is always the full 4x4 action on (q_a, p_a, q_b, p_b).
struct BondGate {
  BondKind kind = BondKind::Position;
  Mat2 A = Mat2::identity();
  Mat4 G = Mat4::identity();
  static BondGate position(const Mat2& A);
  static BondGate symplectic(const Mat4& G);
  bool operator==(const BondGate& o) const { return kind == o.kind && G == o.G; }
};

// Thrown for an invalid gate or circuit; the message says which gate failed
// (an InvalidInput, kernels/errors.hpp).
struct ModelError : InvalidInput {
  using InvalidInput::InvalidInput;
};

// Exact checks; each throws ModelError naming `where` (e.g. "bond 3").
void validate_position_gate(const Mat2& A, const std::string& where);
void validate_symplectic_gate(const Mat4& G, const std::string& where);
void validate_site_gate(const Mat2& g, const std::string& where);

struct Circuit {
  std::int64_t L = 0;
  Boundary boundary = Boundary::Periodic;
  std::vector<BondGate> bonds;  // size bond_count(); bond b acts on (b, b+1 mod L)
  std::vector<Mat2> sites;      // empty: no one-site layer; else size L

  std::int64_t bond_count() const { return boundary == Boundary::Periodic ? L : L - 1; }
  bool has_site_layer() const { return !sites.empty(); }
  // Every bond a position-class gate and no one-site layer: S = M (+) M^-T.
  bool position_class() const;
  // The same gate on every bond and the same gate on every site.
  bool translation_invariant() const;
  // Checks sizes, parity (periodic brick-wall needs even L, L >= 2) and gates.
  void validate() const;
};

// A circuit whose gates are produced on demand, for lattices too large to
// hold every gate and for circuits redrawn every period. `bond(b, t)` and
// `site(i, t)` give the gates of period t (t is ignored by time-periodic
// circuits); they must be pure functions of their arguments.
struct GateSource {
  std::int64_t L = 0;
  Boundary boundary = Boundary::Periodic;
  bool has_site_layer = false;
  bool position_class = true;     // every bond position-class and no site layer
  bool time_periodic = true;      // false: gates redrawn every period
  bool translation_invariant = false;
  std::function<BondGate(std::int64_t b, std::int64_t t)> bond;
  std::function<Mat2(std::int64_t i, std::int64_t t)> site;
  std::int64_t bond_count() const { return boundary == Boundary::Periodic ? L : L - 1; }
};

// All gates of period t as a Circuit (memory O(L)).
Circuit materialize(const GateSource& g, std::int64_t t = 0);

// Sparse integer matrix in compressed rows. Entries are exact int64.
struct SparseInt {
  std::int64_t n = 0;
  std::vector<std::int64_t> rowptr;  // size n + 1
  std::vector<std::int64_t> col;
  std::vector<std::int64_t> val;
  std::int64_t nnz() const { return static_cast<std::int64_t>(val.size()); }
  std::int64_t at(std::int64_t i, std::int64_t j) const;
  // Rows [r0, r1) only, for distributed assembly.
  std::vector<double> dense() const;  // row-major n x n, for small n only
};

// Product x * y with overflow checks.
SparseInt checked_product(const SparseInt& x, const SparseInt& y);

// The one-period matrix S (2L x 2L) in the global coordinate order above.
SparseInt assemble_period(const Circuit& c);
// The L x L position block M of a position-class circuit (S = M (+) M^-T).
SparseInt assemble_position_block(const Circuit& c);

}  // namespace toral

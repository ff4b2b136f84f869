// Tests of the distributed solvers (solvers/): assembly against the serial
// kernels, Krylov/shift-invert against dense LAPACK and Bloch spectra, the
// QR (Benettin) method, and failure reporting. Runs under `mpiexec -n 1` and
// `mpiexec -n 2`; every check is made on every rank (all ranks get the same
// results from collective calls), and no test returns early between
// collective calls.
#include <gtest/gtest.h>
#include <mpi.h>
#include <slepcsys.h>

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <functional>
#include <limits>
#include <string>
#include <utility>
#include <vector>

#include "assemble.hpp"
#include "bloch.hpp"
#include "families.hpp"
#include "krylov.hpp"
#include "layers.hpp"
#include "model.hpp"
#include "spectrum.hpp"
#include "tangent.hpp"
#include "test_gates.hpp"

namespace toral {
namespace {

using testgates::m2;
using testgates::two_shear;
using testgates::coupling;
using testgates::local_pair;


// Counter-based draw in [lo, hi] (kernels/families.hpp).
std::int64_t draw(std::uint64_t seed, std::uint64_t slot, std::uint64_t index, std::uint64_t tag,
                  std::int64_t lo, std::int64_t hi) {
  return draw_uniform(seed, 0x5eed, slot, index, tag, lo, hi);
}

enum class Kind { Position, Symplectic, SiteLayer };

// A disordered circuit: shear2 gates with a, b in [-2, 2] per bond (and per
// site for the site layer); Symplectic bonds are (s (+) t) * coupling * A
// with shear2 s, t, A. redrawn: every period t draws new gates. generic:
// a, b in {-2, -1, 1, 2} (no unipotent or identity gates, whose repeated
// local structures give degenerate eigenvalues and Jordan blocks).
GateSource disordered(Kind kind, std::int64_t L, Boundary bc, std::uint64_t seed, bool redrawn = false,
                      bool generic = false) {
  GateSource g;
  g.L = L;
  g.boundary = bc;
  g.has_site_layer = kind == Kind::SiteLayer;
  g.position_class = kind == Kind::Position;
  g.time_periodic = !redrawn;
  g.translation_invariant = false;
  auto tag = [redrawn](std::int64_t t, std::uint64_t base) {
    return base + (redrawn ? static_cast<std::uint64_t>(t) << 8 : 0);
  };
  auto par = [seed, generic](std::uint64_t slot, std::uint64_t idx, std::uint64_t tg) -> std::int64_t {
    if (!generic) return draw(seed, slot, idx, tg, -2, 2);
    const std::int64_t v = draw(seed, slot, idx, tg, -2, 1);  // -2, -1, 0, 1 -> -2, -1, 1, 2
    return v >= 0 ? v + 1 : v;
  };
  auto sh = [par](std::uint64_t slot, std::uint64_t idx, std::uint64_t tg) {
    return two_shear(par(slot, 2 * idx, tg), par(slot, 2 * idx + 1, tg));
  };
  if (kind == Kind::Symplectic) {
    g.bond = [=](std::int64_t b, std::int64_t t) {
      const std::uint64_t tg = tag(t, 1), s = static_cast<std::uint64_t>(b);
      const Mat4 G = checked_matmul(checked_matmul(local_pair(sh(s, 0, tg), sh(s, 1, tg)), coupling()),
                                    embed_position_gate(sh(s, 2, tg)));
      return BondGate::symplectic(G);
    };
  } else {
    g.bond = [=](std::int64_t b, std::int64_t t) {
      return BondGate::position(sh(static_cast<std::uint64_t>(b), 0, tag(t, 1)));
    };
  }
  if (g.has_site_layer)
    g.site = [=](std::int64_t i, std::int64_t t) { return sh(static_cast<std::uint64_t>(i), 0, tag(t, 2)); };
  return g;
}

// The same gate on every bond (a clean circuit).
GateSource clean(const Mat2& A, std::int64_t L, Boundary bc) {
  GateSource g;
  g.L = L;
  g.boundary = bc;
  g.translation_invariant = true;
  const BondGate bg = BondGate::position(A);
  g.bond = [bg](std::int64_t, std::int64_t) { return bg; };
  return g;
}

int comm_size() {
  int s = 1;
  MPI_Comm_size(MPI_COMM_WORLD, &s);
  return s;
}

int comm_rank() {
  int r = 0;
  MPI_Comm_rank(MPI_COMM_WORLD, &r);
  return r;
}

// Exact equality of two sparse integer matrices (both with zeros dropped).
void expect_same(const SparseInt& a, const SparseInt& b, const std::string& what) {
  EXPECT_EQ(a.n, b.n) << what;
  EXPECT_EQ(a.rowptr, b.rowptr) << what;
  EXPECT_EQ(a.col, b.col) << what;
  EXPECT_EQ(a.val, b.val) << what;
}

// Serial reference of an operator, dropping nothing but exact zeros.
SparseInt serial_reference(const GateSource& g, std::int64_t t, Operator op) {
  const Circuit c = materialize(g, t);
  if (op == Operator::S) return assemble_period(c);
  return assemble_position_block(c);
}

// A (dense row-major, n x n) times B.
std::vector<std::int64_t> dense_product(const SparseInt& a, const SparseInt& b) {
  const std::int64_t n = a.n;
  std::vector<std::int64_t> r(static_cast<std::size_t>(n * n), 0);
  for (std::int64_t i = 0; i < n; ++i)
    for (std::int64_t k = a.rowptr[i]; k < a.rowptr[i + 1]; ++k)
      for (std::int64_t l = b.rowptr[a.col[k]]; l < b.rowptr[a.col[k] + 1]; ++l)
        r[static_cast<std::size_t>(i * n + b.col[l])] += a.val[k] * b.val[l];
  return r;
}

struct Case {
  std::string name;
  GateSource g;
};

std::vector<Case> assembly_cases() {
  return {
      {"position periodic L=10", disordered(Kind::Position, 10, Boundary::Periodic, 1)},
      {"position open L=9", disordered(Kind::Position, 9, Boundary::Open, 2)},
      {"position periodic L=2", disordered(Kind::Position, 2, Boundary::Periodic, 3)},
      {"symplectic periodic L=8", disordered(Kind::Symplectic, 8, Boundary::Periodic, 4)},
      {"symplectic open L=7", disordered(Kind::Symplectic, 7, Boundary::Open, 5)},
      {"site layer periodic L=12", disordered(Kind::SiteLayer, 12, Boundary::Periodic, 6)},
      {"site layer open L=11", disordered(Kind::SiteLayer, 11, Boundary::Open, 7)},
      {"clean open L=6", clean(m2(2, 1, 1, 1), 6, Boundary::Open)},
  };
}

// (a) The distributed S equals the serial assemble_period entry by entry
// (exact integers; reference: kernels/model.cpp, itself tested in
// tests/test_kernels.cpp), in both layouts; the preallocation is exact.
TEST(Assemble, PeriodMatrixEqualsSerial) {
  for (const auto& cs : assembly_cases())
    for (Layout lay : {Layout::Global, Layout::Interleaved}) {
      const DistMatrix d = assemble_distributed(MPI_COMM_WORLD, cs.g, 0, Operator::S, lay);
      MatInfo info;
      MatGetInfo(d.mat(), MAT_GLOBAL_SUM, &info);
      EXPECT_EQ(info.nz_unneeded, 0.0) << cs.name;  // exact preallocation
      EXPECT_EQ(info.mallocs, 0.0) << cs.name;
      const SparseInt got = gather_to_root(d);
      if (comm_rank() == 0)
        expect_same(got, serial_reference(cs.g, 0, Operator::S), cs.name + (lay == Layout::Global ? " global" : " interleaved"));
    }
}

// (a) M of position-class circuits equals assemble_position_block; M^-1 is
// the exact inverse (M M^-1 = I) and M^-T its transpose, and S = M (+) M^-T
// (docs/model.md: S = M (+) M^-T for position-class circuits).
TEST(Assemble, PositionBlocksEqualSerial) {
  for (const auto& cs : assembly_cases()) {
    if (!cs.g.position_class || cs.g.has_site_layer) continue;
    const SparseInt M = gather_to_root(assemble_distributed(MPI_COMM_WORLD, cs.g, 0, Operator::M));
    const SparseInt Mi = gather_to_root(assemble_distributed(MPI_COMM_WORLD, cs.g, 0, Operator::MInverse));
    const SparseInt Mit = gather_to_root(assemble_distributed(MPI_COMM_WORLD, cs.g, 0, Operator::MInverseT));
    const SparseInt S = gather_to_root(assemble_distributed(MPI_COMM_WORLD, cs.g, 0, Operator::S));
    if (comm_rank() != 0) continue;
    expect_same(M, serial_reference(cs.g, 0, Operator::M), cs.name + " M");
    const std::int64_t L = cs.g.L;
    const std::vector<std::int64_t> P = dense_product(M, Mi);
    for (std::int64_t i = 0; i < L; ++i)
      for (std::int64_t j = 0; j < L; ++j) EXPECT_EQ(P[static_cast<std::size_t>(i * L + j)], i == j ? 1 : 0) << cs.name;
    for (std::int64_t i = 0; i < L; ++i)
      for (std::int64_t j = 0; j < L; ++j) {
        EXPECT_EQ(Mit.at(i, j), Mi.at(j, i)) << cs.name;
        EXPECT_EQ(S.at(i, j), M.at(i, j)) << cs.name;
        EXPECT_EQ(S.at(L + i, L + j), Mit.at(i, j)) << cs.name;
        EXPECT_EQ(S.at(i, L + j), 0) << cs.name;
        EXPECT_EQ(S.at(L + i, j), 0) << cs.name;
      }
  }
}

// (a) A time-redrawn source: period t's matrix equals the serial matrix of
// the gates of period t (and differs from period 0's).
TEST(Assemble, RedrawnPeriods) {
  const GateSource g = disordered(Kind::Symplectic, 8, Boundary::Periodic, 9, true);
  const SparseInt s0 = gather_to_root(assemble_distributed(MPI_COMM_WORLD, g, 0, Operator::S));
  const SparseInt s5 = gather_to_root(assemble_distributed(MPI_COMM_WORLD, g, 5, Operator::S, Layout::Interleaved));
  if (comm_rank() == 0) {
    expect_same(s5, serial_reference(g, 5, Operator::S), "period 5");
    EXPECT_NE(s0.val, s5.val);
  }
}

// The matrix-free layer operator applies the same matrix as the assembled
// one (reference: the assembled matrix, checked above).
TEST(Assemble, LayerOperatorMatchesAssembled) {
  for (const auto& cs : assembly_cases()) {
    if (cs.g.L < 2 * comm_size()) continue;
    std::vector<Operator> ops{Operator::S};
    if (cs.g.position_class && !cs.g.has_site_layer)
      ops = {Operator::S, Operator::M, Operator::MInverse, Operator::MInverseT};
    for (Operator op : ops) {
      const DistMatrix A = assemble_distributed(MPI_COMM_WORLD, cs.g, 0, op, Layout::Interleaved);
      const DistMatrix F = make_layer_operator(MPI_COMM_WORLD, cs.g, 0, op);
      EXPECT_EQ(A.row_begin, F.row_begin);
      EXPECT_EQ(A.row_end, F.row_end);
      Vec x, y1, y2;
      MatCreateVecs(A.mat(), &x, &y1);
      VecDuplicate(y1, &y2);
      PetscScalar* a;
      VecGetArray(x, &a);
      for (PetscInt r = A.row_begin; r < A.row_end; ++r) a[r - A.row_begin] = std::sin(1.0 + 0.37 * A.coordinate(r));
      VecRestoreArray(x, &a);
      MatMult(A.mat(), x, y1);
      MatMult(F.mat(), x, y2);
      PetscReal n1, nd;
      VecNorm(y1, NORM_INFINITY, &n1);
      VecAXPY(y2, -1.0, y1);
      VecNorm(y2, NORM_INFINITY, &nd);
      EXPECT_LE(nd, 1e-13 * n1) << cs.name << " " << operator_name(op);
      VecDestroy(&x);
      VecDestroy(&y1);
      VecDestroy(&y2);
    }
  }
}

// The fused power A^p of a layer operator (one pass in tiles) equals p
// products with the same operator to the bit (reference: MatMult of the
// layer operator, checked against the assembled matrix above). Sizes span
// several tiles of 2048 sites per rank; the small cases hit rank-edge halos.
TEST(Assemble, FusedLayerPowerMatchesRepeatedProducts) {
  std::vector<Case> cases = assembly_cases();
  cases.push_back({"position periodic L=9000", disordered(Kind::Position, 9000, Boundary::Periodic, 11)});
  cases.push_back({"position open L=7001", disordered(Kind::Position, 7001, Boundary::Open, 12)});
  cases.push_back({"symplectic periodic L=5000", disordered(Kind::Symplectic, 5000, Boundary::Periodic, 13)});
  cases.push_back({"symplectic open L=4999", disordered(Kind::Symplectic, 4999, Boundary::Open, 14)});
  cases.push_back({"site layer periodic L=600", disordered(Kind::SiteLayer, 600, Boundary::Periodic, 15)});
  cases.push_back({"clean open L=3000", clean(m2(2, 1, 1, 1), 3000, Boundary::Open)});
  int checked = 0;
  for (const auto& cs : cases) {
    if (cs.g.L < 2 * comm_size()) continue;
    std::vector<Operator> ops{Operator::S};
    if (cs.g.position_class && !cs.g.has_site_layer) ops = {Operator::S, Operator::M, Operator::MInverse};
    for (Operator op : ops) {
      const DistMatrix F = make_layer_operator(MPI_COMM_WORLD, cs.g, 0, op);
      const PetscInt m = F.row_end - F.row_begin;
      const std::int64_t sites = op == Operator::S ? m / 2 : m;
      std::int64_t least = sites;
      MPI_Allreduce(MPI_IN_PLACE, &least, 1, MPI_INT64_T, MPI_MIN, MPI_COMM_WORLD);
      for (int p : {2, 3, 5, 16}) {
        const bool expect = !cs.g.has_site_layer && least >= 2 * p;
        EXPECT_EQ(layer_power_available(F.mat(), p), expect) << cs.name << " p " << p;
        if (!expect) continue;
        Vec x, y1, y2, t;
        MatCreateVecs(F.mat(), &x, &y1);
        VecDuplicate(y1, &y2);
        VecDuplicate(y1, &t);
        PetscScalar* a;
        VecGetArray(x, &a);
        for (PetscInt r = F.row_begin; r < F.row_end; ++r) a[r - F.row_begin] = std::sin(1.0 + 0.37 * F.coordinate(r));
        VecRestoreArray(x, &a);
        VecCopy(x, y1);
        for (int k = 0; k < p; ++k) {
          MatMult(F.mat(), y1, t);
          VecCopy(t, y1);
        }
        layer_power_mult(F.mat(), p, x, y2);
        PetscReal n1, nd;
        VecNorm(y1, NORM_INFINITY, &n1);
        VecAXPY(y2, -1.0, y1);
        VecNorm(y2, NORM_INFINITY, &nd);
        EXPECT_GT(n1, 0.0) << cs.name;
        EXPECT_EQ(nd, 0.0) << cs.name << " " << operator_name(op) << " p " << p;
        ++checked;
        VecDestroy(&x);
        VecDestroy(&y1);
        VecDestroy(&y2);
        VecDestroy(&t);
      }
    }
  }
  EXPECT_GE(checked, 20);
}

// (a) The 32-bit index limit: a clear std::runtime_error before any work.
TEST(Assemble, IndexLimit) {
  GateSource g = disordered(Kind::Position, std::int64_t{1} << 31, Boundary::Periodic, 1);
  try {
    assemble_distributed(MPI_COMM_WORLD, g, 0, Operator::M);
    ADD_FAILURE() << "no error for L = 2^31";
  } catch (const std::runtime_error& e) {
    EXPECT_NE(std::string(e.what()).find("32-bit PetscInt"), std::string::npos) << e.what();
  }
  g.L = std::int64_t{1} << 30;  // M fits, S = 2L does not
  EXPECT_THROW(assemble_distributed(MPI_COMM_WORLD, g, 0, Operator::S), std::runtime_error);
  EXPECT_THROW(check_index_limit(std::int64_t{1} << 31, "test"), std::runtime_error);
  EXPECT_NO_THROW(check_index_limit((std::int64_t{1} << 31) - 1, "test"));
}

// An invalid gate is reported on every rank (collectively) naming the bond.
TEST(Assemble, InvalidGateIsCollective) {
  GateSource g = disordered(Kind::Position, 20, Boundary::Open, 1);
  auto base = g.bond;
  g.bond = [base](std::int64_t b, std::int64_t t) {
    if (b == 17) {  // det 2: invalid (lives on the last rank's rows only)
      BondGate bad;
      bad.kind = BondKind::Position;
      bad.A = m2(2, 0, 0, 1);
      return bad;
    }
    return base(b, t);
  };
  try {
    assemble_distributed(MPI_COMM_WORLD, g, 0, Operator::M);
    ADD_FAILURE() << "no error for an invalid gate";
  } catch (const ModelError& e) {
    EXPECT_NE(std::string(e.what()).find("bond 17"), std::string::npos) << e.what();
  }
}

// ---- (b) Krylov / shift-invert against dense LAPACK and Bloch -------------

// Top K of a dense spectrum (kernels/spectrum.hpp, LAPACK dgeevx).
std::vector<double> dense_top(const GateSource& g, int K) {
  const Spectrum s = dense_spectrum(materialize(g));
  return std::vector<double>(s.exponents.begin(), s.exponents.begin() + K);
}

void expect_top(const KrylovResult& r, const std::vector<double>& ref, double tol, const std::string& what) {
  ASSERT_TRUE(r.ok) << what << ": " << r.message;
  ASSERT_EQ(r.exponents.size(), ref.size()) << what;
  for (std::size_t i = 0; i < ref.size(); ++i) EXPECT_NEAR(r.exponents[i], ref[i], tol) << what << " i=" << i;
  EXPECT_LE(r.max_residual, 1e-12) << what;
}

// Disordered rings and chains: Krylov-Schur (the default power 5 and plain)
// agrees with dense LAPACK to 1e-9 for the top K.
TEST(Krylov, DisorderedMatchesDense) {
  struct C {
    std::string name;
    GateSource g;
    int K;
  };
  const std::vector<C> cases = {
      {"position ring L=200", disordered(Kind::Position, 200, Boundary::Periodic, 11), 8},
      {"position chain L=199", disordered(Kind::Position, 199, Boundary::Open, 12), 8},
      {"symplectic ring L=100", disordered(Kind::Symplectic, 100, Boundary::Periodic, 13), 6},
      {"site layer chain L=101", disordered(Kind::SiteLayer, 101, Boundary::Open, 14), 6},
  };
  for (const auto& c : cases) {
    const std::vector<double> ref = dense_top(c.g, c.K);
    for (int power : {5, 1}) {
      KrylovOptions o;
      o.nev = c.K;
      o.power = power;
      const KrylovResult r = krylov_top(MPI_COMM_WORLD, c.g, o);
      expect_top(r, ref, 1e-9, c.name + " power " + std::to_string(power));
      EXPECT_EQ(r.method, KrylovMethod::KrylovSchur) << c.name;
      EXPECT_GE(r.converged, c.K);
      EXPECT_GT(r.iterations, 0);
      EXPECT_GT(r.wall_seconds, 0.0);
      EXPECT_FALSE(r.stages.empty());
      EXPECT_FALSE(r.clustered) << c.name;
    }
  }
}

// Forced shift-and-invert (banded solver and MUMPS) on a disordered ring and
// a symplectic chain agrees with dense LAPACK to 1e-9.
// The symplectic chain's top is 66.9, then a complex pair -36.4 +- 8.0i, then
// -33.7 (dense LAPACK of the same matrix): it needs the real targets +-sigma
// and a complex target.
TEST(Krylov, ShiftInvertMatchesDense) {
  const GateSource ring = disordered(Kind::Position, 120, Boundary::Periodic, 21);
  const GateSource chain = disordered(Kind::Symplectic, 61, Boundary::Open, 22);
  const GateSource sring = disordered(Kind::Symplectic, 40, Boundary::Periodic, 23);
  const GateSource site = disordered(Kind::SiteLayer, 41, Boundary::Open, 24);
  for (const GateSource* g : {&ring, &chain, &sring, &site})
    for (const auto& [solver, name] : {std::pair{ShiftInvertSolver::Banded, "banded"},
                                        std::pair{ShiftInvertSolver::Mumps, "mumps"}}) {
      KrylovOptions o;
      o.nev = 4;
      o.policy = KrylovPolicy::ShiftInvert;
      o.si_solver = solver;
      const KrylovResult r = krylov_top(MPI_COMM_WORLD, *g, o);
      expect_top(r, dense_top(*g, 4), 1e-9, std::string("shift-invert ") + name);
      EXPECT_EQ(r.method, KrylovMethod::ShiftInvert);
    }
}

// The clean open chain of Arnold's cat gate [[2,1],[1,1]]: a band-edge top.
// auto goes to shift-invert (clean circuit), agrees with dense LAPACK to 1e-9
// and reports the cluster: at L = 400 the top exponents of this chain are
// 1.762704, 1.762574, 1.762357, ... (gaps ~1e-4, numpy.linalg.eigvals on the
// same matrix), so with cluster_tol = 1e-3 several computed values lie
// within tolerance of lambda_max.
TEST(Krylov, CleanOpenChainClusterShiftInvert) {
  const GateSource g = clean(m2(2, 1, 1, 1), 400, Boundary::Open);
  KrylovOptions o;
  o.nev = 6;
  o.cluster_tol = 1e-3;
  const KrylovResult r = krylov_top(MPI_COMM_WORLD, g, o);
  expect_top(r, dense_top(g, 6), 1e-9, "clean open chain");
  EXPECT_EQ(r.method, KrylovMethod::ShiftInvert);
  EXPECT_TRUE(r.clustered) << r.message;
  EXPECT_GE(r.cluster_count, 2);
  EXPECT_LE(r.cluster_spread, o.cluster_tol);
  EXPECT_NE(r.message.find("clustered"), std::string::npos);
  // A disordered ring's top is not clustered at this tolerance (its top gaps
  // are > 1e-2 in the dense spectrum of the same circuit).
  const GateSource dis = disordered(Kind::Position, 200, Boundary::Periodic, 11);
  const std::vector<double> ref = dense_top(dis, 3);
  KrylovOptions od;
  od.nev = 3;
  od.cluster_tol = 1e-3;
  const KrylovResult rd = krylov_top(MPI_COMM_WORLD, dis, od);
  ASSERT_TRUE(rd.ok) << rd.message;
  EXPECT_EQ(rd.clustered, ref[0] - ref[2] <= 1e-3 && ref[0] - ref[1] <= 1e-3);
}

// The same chain at L = 1e5, where the band-edge cluster is dense (spacing
// ~2e-9 relative): the top six distinct eigenvalues of M, each an exponent of
// S twice (M and M^-1). Reference: scipy.linalg.eig_banded (LAPACK dsbevx,
// scipy 1.10) on the symmetric banded matrix E^{1/2} O E^{1/2}, which is
// similar to M = O E (E symmetric positive definite), select='i', top six;
// printed to 15 decimals.
TEST(Krylov, CleanOpenChainDenseClusterL1e5) {
  const double ref[6] = {1.762747173341052, 1.762747171247435, 1.762747167758074,
                         1.762747162872967, 1.762747156592116, 1.762747148915519};
  const GateSource g = clean(m2(2, 1, 1, 1), 100000, Boundary::Open);
  KrylovOptions o;
  o.nev = 12;
  const KrylovResult r = krylov_top(MPI_COMM_WORLD, g, o);
  ASSERT_TRUE(r.ok) << r.message;
  ASSERT_EQ(r.exponents.size(), 12u);
  EXPECT_EQ(r.method, KrylovMethod::ShiftInvert);
  for (int j = 0; j < 6; ++j) {
    EXPECT_NEAR(r.exponents[static_cast<std::size_t>(2 * j)], ref[j], 1e-10) << "j=" << j;
    EXPECT_NEAR(r.exponents[static_cast<std::size_t>(2 * j + 1)], ref[j], 1e-10) << "j=" << j;
  }
  EXPECT_LE(r.max_residual, 1e-12);
  EXPECT_TRUE(r.clustered);
  // Every computed value of M lies within the default cluster_tol = 1e-6: at
  // least the six above, so the spread covers theirs.
  EXPECT_GE(r.cluster_count, 6);
  EXPECT_GE(r.cluster_spread, ref[0] - ref[5] - 1e-10);
  EXPECT_LE(r.cluster_spread, o.cluster_tol);
}

// A clean periodic ring, forced to shift-invert, agrees with the exact Bloch
// spectrum (kernels/bloch.hpp) for its non-degenerate top (k = 0).
TEST(Krylov, CleanRingMatchesBloch) {
  const GateSource g = clean(m2(2, 1, 1, 1), 64, Boundary::Periodic);
  const Spectrum b = bloch_spectrum(materialize(g));
  KrylovOptions o;
  o.nev = 1;
  o.policy = KrylovPolicy::ShiftInvert;
  const KrylovResult r = krylov_top(MPI_COMM_WORLD, g, o);
  ASSERT_TRUE(r.ok) << r.message;
  EXPECT_NEAR(r.exponents[0], b.exponents[0], 1e-9);
}

// Tiny lattices: fewer rows per rank than the banded solver or the
// matrix-free operator need (they fall back to MUMPS and to the assembled
// matrix), dimensions below SLEPc's default ncv, and eigenvalues found from
// two shift-invert targets. Reference: dense LAPACK. Circuits with unipotent
// gates have Jordan blocks on the unit circle; a block of size k moves by
// ~eps^(1/k) under rounding (Wilkinson, The Algebraic Eigenvalue Problem,
// ch. 2; docs/model.md notes the sqrt(eps) of k = 2), and blocks of size 3
// occur here: 1e-4 for those circuits, 1e-9 for the generic ones.
TEST(Krylov, TinyLattices) {
  struct C {
    GateSource g;
    int K;
    double tol;
  };
  const std::vector<C> cases = {
      {disordered(Kind::Symplectic, 6, Boundary::Periodic, 51), 4, 1e-4},
      {disordered(Kind::Symplectic, 6, Boundary::Periodic, 51, false, true), 4, 1e-9},
      {disordered(Kind::Position, 2, Boundary::Periodic, 52, false, true), 2, 1e-9},
      {disordered(Kind::SiteLayer, 3, Boundary::Open, 53), 3, 1e-4},
      {disordered(Kind::SiteLayer, 3, Boundary::Open, 53, false, true), 3, 1e-9},
  };
  for (const auto& c : cases)
    for (const auto& [policy, name] : {std::pair{KrylovPolicy::Auto, "auto"},
                                        std::pair{KrylovPolicy::ShiftInvert, "shift_invert"}}) {
      KrylovOptions o;
      o.nev = c.K;
      o.policy = policy;
      const KrylovResult r = krylov_top(MPI_COMM_WORLD, c.g, o);
      const std::string what = "L=" + std::to_string(c.g.L) + " " + name;
      ASSERT_TRUE(r.ok) << what << ": " << r.message;
      const std::vector<double> ref = dense_top(c.g, c.K);
      ASSERT_EQ(r.exponents.size(), ref.size());
      for (std::size_t i = 0; i < ref.size(); ++i) EXPECT_NEAR(r.exponents[i], ref[i], c.tol) << what << " i=" << i;
      EXPECT_LE(r.max_residual, 1e-11) << what;
    }
}

// Options in the PETSc database apply over the code's defaults
// (EPSSetFromOptions is called last): -toral_eps_max_it 1 makes the
// Krylov-Schur stage of a policy "largest" solve fail although
// KrylovOptions::max_it allows 100 restarts.
TEST(Krylov, OptionsDatabaseOverrides) {
  const GateSource g = disordered(Kind::Position, 200, Boundary::Periodic, 11);
  KrylovOptions o;
  o.nev = 8;
  o.policy = KrylovPolicy::Largest;
  ASSERT_TRUE(krylov_top(MPI_COMM_WORLD, g, o).ok);
  PetscOptionsSetValue(nullptr, "-toral_eps_max_it", "1");
  const KrylovResult r = krylov_top(MPI_COMM_WORLD, g, o);
  PetscOptionsClearValue(nullptr, "-toral_eps_max_it");
  EXPECT_FALSE(r.ok);
  EXPECT_NE(r.message.find("did not converge"), std::string::npos) << r.message;
}

// ---- (c) the QR (Benettin) method --------------------------------------

// Time-periodic disordered circuits: tangent_top agrees with dense LAPACK
// within its own error estimate (3 errors, plus 1e-12 for the reference's
// rounding), the estimate is small, and it contains the window standard
// error and the halves' drift (solvers/tangent.hpp; its coverage is
// test_tangent_coverage.cpp).
TEST(Tangent, TimePeriodicMatchesDense) {
  struct C {
    std::string name;
    GateSource g;
    int k;
  };
  const std::vector<C> cases = {
      {"position ring L=24", disordered(Kind::Position, 24, Boundary::Periodic, 31, false, true), 4},
      {"symplectic chain L=11", disordered(Kind::Symplectic, 11, Boundary::Open, 32, false, true), 4},
  };
  for (const auto& c : cases) {
    const std::vector<double> ref = dense_top(c.g, c.k);
    TangentOptions o;
    o.k = c.k;
    o.periods = 2000;
    o.transient = 200;
    o.windows = 20;
    const TangentResult r = tangent_top(MPI_COMM_WORLD, c.g, o);
    ASSERT_TRUE(r.ok) << c.name << ": " << r.message;
    ASSERT_EQ(r.exponents.size(), ref.size());
    for (int i = 0; i < c.k; ++i) {
      EXPECT_NEAR(r.exponents[static_cast<std::size_t>(i)], ref[static_cast<std::size_t>(i)],
                  3 * r.errors[static_cast<std::size_t>(i)] + 1e-12)
          << c.name << " i=" << i << " err=" << r.errors[static_cast<std::size_t>(i)];
      EXPECT_LT(r.errors[static_cast<std::size_t>(i)], 1e-2) << c.name;
      EXPECT_GE(r.errors[static_cast<std::size_t>(i)],
                std::hypot(r.standard_errors[static_cast<std::size_t>(i)], r.drift[static_cast<std::size_t>(i)]))
          << c.name;
    }
  }
}

// Gates redrawn every period: all 2L exponents are finite, sum to ~0
// (det S_t = 1 every period: the sum of ln|R_jj| over a full basis is
// ln|det| = 0 up to rounding), and come out the same on 1 rank and on the
// world communicator to 1e-11 (not bit-for-bit: the reductions' order
// depends on the partition).
// (L = 3 on 2 ranks is below the matrix-free operator's 2 sites per rank:
// the period's matrix is then assembled every period.)
TEST(Tangent, RedrawnCircuit) {
  struct C {
    Kind kind;
    std::int64_t L;
    Boundary bc;
  };
  for (const C& c : {C{Kind::Position, 16, Boundary::Periodic}, C{Kind::Symplectic, 8, Boundary::Periodic},
                     C{Kind::Symplectic, 3, Boundary::Open}}) {
    const std::int64_t L = c.L;
    const GateSource g = disordered(c.kind, L, c.bc, 41, true);
    TangentOptions o;
    o.k = static_cast<int>(2 * L);
    o.periods = 400;
    o.transient = 40;
    o.windows = 10;
    o.seed = 7;
    const TangentResult r = tangent_top(MPI_COMM_WORLD, g, o);
    ASSERT_TRUE(r.ok) << r.message;
    ASSERT_EQ(r.exponents.size(), static_cast<std::size_t>(2 * L));
    double sum = 0.0;
    for (double x : r.exponents) {
      EXPECT_TRUE(std::isfinite(x));
      sum += x;
    }
    EXPECT_NEAR(sum, 0.0, 1e-10);
    EXPECT_GT(r.exponents.front(), 0.1);  // chaotic: the top grows
    // +- pairing of a symplectic cocycle (Oseledets): within the errors.
    for (std::size_t i = 0; i < r.exponents.size(); ++i) {
      const std::size_t j = r.exponents.size() - 1 - i;
      EXPECT_NEAR(r.exponents[i], -r.exponents[j], 4 * (r.errors[i] + r.errors[j]) + 1e-9);
    }
    const TangentResult s = tangent_top(MPI_COMM_SELF, g, o);
    ASSERT_TRUE(s.ok) << s.message;
    for (std::size_t i = 0; i < r.exponents.size(); ++i) EXPECT_NEAR(r.exponents[i], s.exponents[i], 1e-11);
  }
}

// ---- (d) failures come back as ok = false with a message -----------------

TEST(Failures, ReportedNotThrown) {
  const GateSource chain = clean(m2(2, 1, 1, 1), 2000, Boundary::Open);
  KrylovOptions o;
  o.nev = 6;
  o.policy = KrylovPolicy::Largest;
  o.max_it = 1;
  KrylovResult r = krylov_top(MPI_COMM_WORLD, chain, o);
  EXPECT_FALSE(r.ok);
  EXPECT_NE(r.message.find("did not converge"), std::string::npos) << r.message;
  o.policy = KrylovPolicy::Auto;
  o.tol = 1e-18;  // below rounding: no stage can converge
  r = krylov_top(MPI_COMM_WORLD, chain, o);
  EXPECT_FALSE(r.ok);
  EXPECT_FALSE(r.message.empty());
  // Redrawn gates have no one-period eigenproblem.
  r = krylov_top(MPI_COMM_WORLD, disordered(Kind::Position, 40, Boundary::Periodic, 1, true), KrylovOptions{});
  EXPECT_FALSE(r.ok);
  EXPECT_NE(r.message.find("redrawn"), std::string::npos) << r.message;
  // Clean periodic rings belong to Bloch in auto.
  r = krylov_top(MPI_COMM_WORLD, clean(m2(2, 1, 1, 1), 100, Boundary::Periodic), KrylovOptions{});
  EXPECT_FALSE(r.ok);
  EXPECT_NE(r.message.find("bloch"), std::string::npos) << r.message;
  // An invalid gate is a message naming it, on every rank.
  GateSource bad = disordered(Kind::Position, 40, Boundary::Open, 1);
  auto base = bad.bond;
  bad.bond = [base](std::int64_t b, std::int64_t t) {
    if (b == 30) {
      BondGate x;
      x.kind = BondKind::Position;
      x.A = m2(3, 1, 1, 1);  // det 2
      return x;
    }
    return base(b, t);
  };
  r = krylov_top(MPI_COMM_WORLD, bad, KrylovOptions{});
  EXPECT_FALSE(r.ok);
  EXPECT_NE(r.message.find("bond 30"), std::string::npos) << r.message;
  TangentOptions to;
  to.periods = 1;
  const TangentResult t = tangent_top(MPI_COMM_WORLD, bad, to);
  EXPECT_FALSE(t.ok);
  EXPECT_FALSE(t.message.empty());
  to.periods = 100;
  const TangentResult t2 = tangent_top(MPI_COMM_WORLD, bad, to);
  EXPECT_FALSE(t2.ok);
  EXPECT_NE(t2.message.find("bond 30"), std::string::npos) << t2.message;
}

// Prints failed assertions of ranks other than 0, which run silently.
class RankFailurePrinter : public ::testing::EmptyTestEventListener {
 public:
  explicit RankFailurePrinter(int rank) : rank_(rank) {}
  void OnTestPartResult(const ::testing::TestPartResult& r) override {
    if (r.failed())
      std::fprintf(stderr, "[rank %d] %s:%d: failure\n%s\n", rank_, r.file_name() ? r.file_name() : "?",
                   r.line_number(), r.summary());
  }

 private:
  int rank_;
};

}  // namespace
}  // namespace toral

int main(int argc, char** argv) {
  ::testing::InitGoogleTest(&argc, argv);
  SlepcInitialize(&argc, &argv, nullptr, nullptr);
  int rank = 0;
  MPI_Comm_rank(MPI_COMM_WORLD, &rank);
  if (rank != 0) {
    auto& listeners = ::testing::UnitTest::GetInstance()->listeners();
    delete listeners.Release(listeners.default_result_printer());
    listeners.Append(new toral::RankFailurePrinter(rank));
  }
  int rc = RUN_ALL_TESTS();
  int worst = rc;
  MPI_Allreduce(&rc, &worst, 1, MPI_INT, MPI_MAX, MPI_COMM_WORLD);
  SlepcFinalize();
  return worst;
}

#include "krylov.hpp"
#include "errors.hpp"

#include <Random123/philox.h>
#include <lapacke.h>
#include <slepceps.h>

#include <algorithm>
#include <cmath>
#include <exception>
#include <functional>
#include <limits>
#include <sstream>
#include <string>
#include <vector>

#include "banded.hpp"
#include "bloch.hpp"
#include "layers.hpp"
#include "petsc_util.hpp"

namespace toral {
namespace {

using cd = std::complex<double>;

struct Eig {
  cd mu;
  double resid = 0.0;
};

bool by_modulus(const Eig& a, const Eig& b) { return std::abs(a.mu) > std::abs(b.mu); }

// ---- A^p as a MatShell (p >= 2) -----------------------------------------

struct PowerCtx {
  Mat A = nullptr;
  int p = 1;
  Vec w = nullptr;
  bool fused = false;  // A is a layer operator with a fused A^p (layers.hpp)
};

PetscErrorCode power_mult(Mat S, Vec x, Vec y) {
  PowerCtx* c;
  PetscCall(MatShellGetContext(S, &c));
  if (c->fused) return layer_power_mult(c->A, c->p, x, y);
  Vec src = x;
  for (int k = 0; k < c->p; ++k) {
    // Alternate between w and y so that the last product lands in y.
    Vec dst = ((c->p - 1 - k) % 2 == 0) ? y : c->w;
    PetscCall(MatMult(c->A, src, dst));
    src = dst;
  }
  return 0;
}

// ---- EPS monitor: the latest Ritz values (of the operator EPS sees) --------

struct RitzRecord {
  std::vector<cd> vals;
  std::vector<double> err;
};

PetscErrorCode record_ritz(EPS eps, PetscInt, PetscInt, PetscScalar* eigr, PetscScalar* eigi,
                           PetscReal* errest, PetscInt nest, void* ctx) {
  auto* rec = static_cast<RitzRecord*>(ctx);
  ST st;
  PetscCall(EPSGetST(eps, &st));
  rec->vals.clear();
  rec->err.clear();
  for (PetscInt i = 0; i < nest; ++i) {
    PetscScalar re = eigr[i], im = eigi[i];
    PetscCall(STBackTransform(st, 1, &re, &im));
    rec->vals.emplace_back(re, im);
    rec->err.push_back(errest[i]);
  }
  return 0;
}

// The p-th root of a Ritz value of A^p with the sign kept for real values (p odd).
cd root_p(cd th, int p) {
  if (p == 1) return th;
  if (th.imag() == 0.0) return cd(std::copysign(std::pow(std::abs(th.real()), 1.0 / p), th.real()), 0.0);
  return std::polar(std::pow(std::abs(th), 1.0 / p), std::arg(th) / p);
}

struct StageOut {
  KrylovStage info;
  std::vector<Eig> eigs;       // accepted eigenpairs of A, sorted by modulus descending
  std::vector<cd> ritz;        // last Ritz values, as eigenvalue estimates of A
  std::vector<double> ritz_err;
};

const char* reason_name(EPSConvergedReason r) {
  switch (r) {
    case EPS_CONVERGED_TOL: return "converged-tol";
    case EPS_CONVERGED_USER: return "converged-user";
    case EPS_DIVERGED_ITS: return "diverged-its (restart budget exhausted)";
    case EPS_DIVERGED_BREAKDOWN: return "diverged-breakdown";
    case EPS_DIVERGED_SYMMETRY_LOST: return "diverged-symmetry-lost";
    case EPS_CONVERGED_ITERATING: return "iterating";
  }
  return "unknown";
}

// Rayleigh-Ritz of A on the converged invariant subspace of A^p: the
// eigenpairs of A there, each with its explicit relative residual.
std::vector<Eig> rayleigh_ritz(EPS eps, Mat A, PetscInt nconv) {
  std::vector<Eig> out;
  if (nconv <= 0) return out;
  const int n = static_cast<int>(nconv);
  std::vector<Vec> V(static_cast<std::size_t>(n));
  UniqueVec t, xr, xi, r;
  TORAL_PCALL(MatCreateVecs(A, t.out(), nullptr));
  TORAL_PCALL(VecDuplicate(t.get(), xr.out()));
  TORAL_PCALL(VecDuplicate(t.get(), xi.out()));
  TORAL_PCALL(VecDuplicate(t.get(), r.out()));
  struct Guard {
    std::vector<Vec>& v;
    ~Guard() {
      for (Vec& x : v)
        if (x) VecDestroy(&x);
    }
  } guard{V};
  for (auto& v : V) TORAL_PCALL(VecDuplicate(t.get(), &v));
  TORAL_PCALL(EPSGetInvariantSubspace(eps, V.data()));
  // H = V^T A V (column-major).
  std::vector<double> H(static_cast<std::size_t>(n) * n), col(static_cast<std::size_t>(n));
  for (int j = 0; j < n; ++j) {
    TORAL_PCALL(MatMult(A, V[static_cast<std::size_t>(j)], t.get()));
    TORAL_PCALL(VecMDot(t.get(), n, V.data(), col.data()));
    for (int i = 0; i < n; ++i) H[static_cast<std::size_t>(j) * n + i] = col[static_cast<std::size_t>(i)];
  }
  std::vector<double> wr(static_cast<std::size_t>(n)), wi(static_cast<std::size_t>(n)),
      Y(static_cast<std::size_t>(n) * n);
  const lapack_int info = LAPACKE_dgeev(LAPACK_COL_MAJOR, 'N', 'V', n, H.data(), n, wr.data(), wi.data(),
                                        nullptr, n, Y.data(), n);
  if (info != 0) throw SolverError("Rayleigh-Ritz: LAPACK dgeev failed");
  auto combine = [&](const double* y, Vec x) {
    TORAL_PCALL(VecSet(x, 0.0));
    TORAL_PCALL(VecMAXPY(x, n, y, V.data()));
  };
  for (int i = 0; i < n; ++i) {
    const double a = wr[static_cast<std::size_t>(i)], b = wi[static_cast<std::size_t>(i)];
    const double* yr = Y.data() + static_cast<std::size_t>(i) * n;
    double res;
    if (b == 0.0) {
      combine(yr, xr.get());
      TORAL_PCALL(MatMult(A, xr.get(), r.get()));
      TORAL_PCALL(VecAXPY(r.get(), -a, xr.get()));
      PetscReal nr, nx;
      TORAL_PCALL(VecNorm(r.get(), NORM_2, &nr));
      TORAL_PCALL(VecNorm(xr.get(), NORM_2, &nx));
      res = nr / (nx * std::fabs(a));
      out.push_back({cd(a, 0.0), res});
    } else {
      if (i + 1 >= n) break;  // an unpaired complex value cannot occur for real H
      const double* yi = Y.data() + static_cast<std::size_t>(i + 1) * n;
      combine(yr, xr.get());
      combine(yi, xi.get());
      // A (xr + i xi) = (a + i b)(xr + i xi): residuals of both real parts.
      PetscReal n1, n2, nx1, nx2;
      TORAL_PCALL(MatMult(A, xr.get(), r.get()));
      TORAL_PCALL(VecAXPBYPCZ(r.get(), -a, b, 1.0, xr.get(), xi.get()));
      TORAL_PCALL(VecNorm(r.get(), NORM_2, &n1));
      TORAL_PCALL(MatMult(A, xi.get(), r.get()));
      TORAL_PCALL(VecAXPBYPCZ(r.get(), -b, -a, 1.0, xr.get(), xi.get()));
      TORAL_PCALL(VecNorm(r.get(), NORM_2, &n2));
      TORAL_PCALL(VecNorm(xr.get(), NORM_2, &nx1));
      TORAL_PCALL(VecNorm(xi.get(), NORM_2, &nx2));
      res = std::hypot(n1, n2) / (std::hypot(nx1, nx2) * std::hypot(a, b));
      out.push_back({cd(a, b), res});
      out.push_back({cd(a, -b), res});
      ++i;
    }
  }
  return out;
}

// A zero-mean start vector, entries 2u - 1 with u uniform from Philox4x64-10
// keyed by toral coordinate: the same vector for any rank count and layout,
// so every stage starts from the same global vector however the lattice is
// distributed (results still differ across rank counts at rounding level).
void set_start_vector(EPS eps, const DistMatrix& A) {
  UniqueVec v;
  TORAL_PCALL(MatCreateVecs(A.mat(), v.out(), nullptr));
  PetscScalar* a;
  TORAL_PCALL(VecGetArray(v.get(), &a));
  r123::Philox4x64 gen;
  const r123::Philox4x64::key_type key = {{0x746f72616c2d6b73ULL, 0}};  // "toral-ks"
  for (PetscInt r = A.row_begin; r < A.row_end; ++r) {
    const r123::Philox4x64::ctr_type ctr = {{static_cast<std::uint64_t>(A.coordinate(r)), 0, 0, 0}};
    const auto x = gen(ctr, key);
    a[r - A.row_begin] = 2.0 * (static_cast<double>(x[0] >> 11) * 0x1.0p-53) - 1.0;
  }
  TORAL_PCALL(VecRestoreArray(v.get(), &a));
  Vec vv = v.get();
  TORAL_PCALL(EPSSetInitialSpace(eps, 1, &vv));
}

struct StageSpec {
  const char* method = "krylov-schur";
  bool shift_invert = false;
  double sigma = 0.0;
  int nev = 1;
  int max_it = 100;
  double tol = 1e-12;
  int power = 1;
  std::string prefix;
  ShiftInvertSolver si_solver = ShiftInvertSolver::Banded;
  Mat custom = nullptr;  // f(A) to run on (largest magnitude), eigenpairs by Rayleigh-Ritz on A
  double target = 0.0;   // |target| for the diagnostics of a custom operator
};

// Whether the banded solver (banded.hpp) applies to A: every rank owns at
// least 2b rows and the reduced system 2bP stays small. b is the cyclic
// half-bandwidth of the brick-wall operators: 2 for M-type (row i reaches
// sites i-2 .. i+1), 5 for S interleaved (coordinates 2i-5 .. 2i+3).
bool banded_applies(const DistMatrix& A) {
  MPI_Comm comm = PetscObjectComm(reinterpret_cast<PetscObject>(A.mat()));
  int size = 1;
  MPI_Comm_size(comm, &size);
  const int b = A.op == Operator::S ? 5 : 2;
  int rows = static_cast<int>(A.row_end - A.row_begin), least = rows;
  MPI_Allreduce(&rows, &least, 1, MPI_INT, MPI_MIN, comm);
  return least >= 2 * b && 2 * b * size <= 8192;
}

// One EPS solve on A (shift-invert: target sigma) or on A^power.
StageOut run_stage(const DistMatrix& A, const StageSpec& sp) {
  StageOut out;
  out.info.op = operator_name(A.op);
  out.info.method = sp.method;
  out.info.power = sp.shift_invert ? 1 : sp.power;
  out.info.target = sp.shift_invert ? sp.sigma : 0.0;
  MPI_Comm comm = PetscObjectComm(reinterpret_cast<PetscObject>(A.mat()));
  const int p = out.info.power;
  PowerCtx pctx;
  UniqueMat shell;
  UniqueVec work;
  Mat op = A.mat();
  const bool rr = p > 1 || sp.custom;
  if (sp.custom) {
    op = sp.custom;
    out.info.target = sp.target;
  } else if (p > 1) {
    TORAL_PCALL(MatCreateVecs(A.mat(), work.out(), nullptr));
    pctx = PowerCtx{op, p, work.get(), layer_power_available(op, p)};
    const PetscInt m = A.row_end - A.row_begin;
    TORAL_PCALL(MatCreateShell(comm, m, m, A.n, A.n, &pctx, shell.out()));
    TORAL_PCALL(MatShellSetOperation(shell.get(), MATOP_MULT, reinterpret_cast<void (*)(void)>(power_mult)));
    op = shell.get();
  }
  UniqueEPS eps;
  RitzRecord rec;
  TORAL_PCALL(EPSCreate(comm, eps.out()));
  TORAL_PCALL(EPSSetOperators(eps.get(), op, nullptr));
  TORAL_PCALL(EPSSetProblemType(eps.get(), EPS_NHEP));
  TORAL_PCALL(EPSSetType(eps.get(), EPSKRYLOVSCHUR));
  if (!sp.prefix.empty()) TORAL_PCALL(EPSSetOptionsPrefix(eps.get(), sp.prefix.c_str()));
  const PetscInt k = std::min<PetscInt>(static_cast<PetscInt>(sp.nev), A.n);
  TORAL_PCALL(EPSSetDimensions(eps.get(), k, PETSC_DEFAULT, PETSC_DEFAULT));
  // On A^p the residual is that of A^p; the accepted pairs are re-checked on A.
  // (shift-invert: the tolerance applies to the transformed problem; a
  // smaller one keeps the residual on A below tol.)
  const double eps_tol = (rr || sp.shift_invert) ? 0.01 * sp.tol : sp.tol;
  TORAL_PCALL(EPSSetTolerances(eps.get(), eps_tol, static_cast<PetscInt>(sp.max_it)));
  TORAL_PCALL(EPSSetConvergenceTest(eps.get(), EPS_CONV_REL));
  if (sp.shift_invert) {
    TORAL_PCALL(EPSSetWhichEigenpairs(eps.get(), EPS_TARGET_MAGNITUDE));
    TORAL_PCALL(EPSSetTarget(eps.get(), sp.sigma));
    ST st;
    KSP ksp;
    PC pc;
    TORAL_PCALL(EPSGetST(eps.get(), &st));
    TORAL_PCALL(STSetType(st, STSINVERT));
    TORAL_PCALL(STGetKSP(st, &ksp));
    TORAL_PCALL(KSPSetType(ksp, KSPPREONLY));
    TORAL_PCALL(KSPGetPC(ksp, &pc));
    if (sp.si_solver == ShiftInvertSolver::Banded && banded_applies(A)) {
      TORAL_PCALL(pc_set_banded(pc));
    } else {
      if (sp.si_solver == ShiftInvertSolver::Banded) out.info.method += " (mumps: too few rows per rank for banded)";
      TORAL_PCALL(PCSetType(pc, PCLU));
      TORAL_PCALL(PCFactorSetMatSolverType(pc, MATSOLVERMUMPS));
    }
  } else {
    TORAL_PCALL(EPSSetWhichEigenpairs(eps.get(), EPS_LARGEST_MAGNITUDE));
  }
  // Classical Gram-Schmidt, refined when the norm drops below 0.3 of its
  // value (SLEPc's default 1/sqrt 2 refined every vector here, doubling the
  // dominant cost; one pass leaves an orthogonality error ~ eps / 0.3).
  BV bv;
  TORAL_PCALL(EPSGetBV(eps.get(), &bv));
  TORAL_PCALL(BVSetOrthogonalization(bv, BV_ORTHOG_CGS, BV_ORTHOG_REFINE_IFNEEDED, 0.3, BV_ORTHOG_BLOCK_GS));
  set_start_vector(eps.get(), A);
  TORAL_PCALL(EPSMonitorSet(eps.get(), record_ritz, &rec, nullptr));
  TORAL_PCALL(EPSSetFromOptions(eps.get()));  // last: the options database wins
  TORAL_PCALL(EPSSolve(eps.get()));
  PetscInt nconv = 0, its = 0, want = k;
  EPSConvergedReason why;
  TORAL_PCALL(EPSGetConverged(eps.get(), &nconv));
  TORAL_PCALL(EPSGetIterationNumber(eps.get(), &its));
  TORAL_PCALL(EPSGetConvergedReason(eps.get(), &why));
  TORAL_PCALL(EPSGetDimensions(eps.get(), &want, nullptr, nullptr));
  if (rr) {
    for (const Eig& e : rayleigh_ritz(eps.get(), A.mat(), nconv))
      if (e.resid <= sp.tol) out.eigs.push_back(e);
  } else {
    for (PetscInt i = 0; i < nconv; ++i) {
      PetscScalar re, im;
      PetscReal err;
      TORAL_PCALL(EPSGetEigenvalue(eps.get(), i, &re, &im));
      TORAL_PCALL(EPSComputeError(eps.get(), i, EPS_ERROR_RELATIVE, &err));
      out.eigs.push_back({cd(re, im), static_cast<double>(err)});
    }
  }
  std::stable_sort(out.eigs.begin(), out.eigs.end(), by_modulus);
  if (!sp.custom)
    for (std::size_t i = 0; i < rec.vals.size(); ++i) {
      out.ritz.push_back(root_p(rec.vals[i], p));
      out.ritz_err.push_back(rec.err[i]);
    }
  out.info.requested = want;
  out.info.converged = static_cast<std::int64_t>(out.eigs.size());
  out.info.iterations = its;
  out.info.reason = reason_name(why);
  if (rr && static_cast<PetscInt>(out.eigs.size()) < std::min(nconv, want))
    out.info.reason += " (some Rayleigh-Ritz residuals on A above tol)";
  for (const Eig& e : out.eigs) out.info.max_residual = std::max(out.info.max_residual, e.resid);
  return out;
}

// The outcome for one operator (S, M or M^-1).
struct OpOutcome {
  std::vector<Eig> eigs;  // sorted by modulus descending
  bool used_si = false;
  std::string warning;
};

std::string stage_summary(const StageOut& s) {
  std::ostringstream os;
  os << s.info.op << " " << s.info.method << ": " << s.info.converged << " of " << s.info.requested
     << " converged after " << s.info.iterations << " restarts (" << s.info.reason << ")";
  return os.str();
}

struct Context {
  const KrylovOptions& o;
  const DistMatrix* kop = nullptr;                  // Krylov-Schur operator (matrix-free if possible)
  std::function<const DistMatrix&()> assembled;     // the assembled matrix, built on first use
  bool clean;
  double rho_bulk;
  std::vector<KrylovStage>& log;
  std::int64_t& its;
  void record(const StageOut& s) {
    log.push_back(s.info);
    its += s.info.iterations;
  }
};

StageSpec base_spec(const KrylovOptions& o, int nev) {
  StageSpec sp;
  sp.nev = nev;
  sp.max_it = o.max_it;
  sp.tol = o.tol;
  sp.power = o.power;
  sp.prefix = o.options_prefix;
  sp.si_solver = o.si_solver;
  return sp;
}

// Estimates of the top eigenvalues from a Krylov-Schur stage: converged
// values, then the last Ritz values, sorted by modulus (at most n).
std::vector<cd> estimates(const StageOut& ks, std::size_t n) {
  std::vector<cd> e;
  for (const Eig& x : ks.eigs) e.push_back(x.mu);
  for (cd v : ks.ritz)
    if (std::isfinite(v.real()) && std::isfinite(v.imag()) && std::abs(v) > 0) e.push_back(v);
  std::stable_sort(e.begin(), e.end(), [](cd a, cd b) { return std::abs(a) > std::abs(b); });
  // Drop near duplicates (a converged value is also among the Ritz values).
  std::vector<cd> out;
  for (cd v : e) {
    bool dup = false;
    for (cd w : out) dup = dup || std::abs(v - w) <= 1e-8 * std::abs(v);
    if (!dup) out.push_back(v);
    if (out.size() == n) break;
  }
  return out;
}

// Shift-and-invert around every direction in which the Krylov-Schur stage
// saw top eigenvalues: real targets +-sigma (STSINVERT, |sigma| just beyond
// the largest modulus, moved out while eigenvalues beyond it turn up) and, for
// estimates off the real axis, complex targets through the real operator
// [(A - sigma)(A - conj sigma)]^-1 with Rayleigh-Ritz on A. The results are
// merged; estimates of the top K that no target reached are reported.
OpOutcome shift_invert(Context& cx, const StageOut& ks, int nev) {
  const KrylovOptions& o = cx.o;
  const DistMatrix& A = cx.assembled();
  OpOutcome r;
  r.used_si = true;
  const std::vector<cd> est = estimates(ks, static_cast<std::size_t>(nev));
  double rho = 1.0;  // |det| = 1 for every operator here: spectral radius >= 1
  if (cx.clean) {
    // The bulk band edge, unless the probe saw a converging outlier above it.
    rho = std::max(rho, cx.rho_bulk);
    for (std::size_t i = 0; i < ks.ritz.size(); ++i)
      if (std::abs(ks.ritz[i]) > cx.rho_bulk * (1 + 1e-4) && ks.ritz_err[i] < 1e-4)
        rho = std::max(rho, std::abs(ks.ritz[i]));
    for (const Eig& e : ks.eigs) rho = std::max(rho, std::abs(e.mu));
  } else {
    for (cd v : est) rho = std::max(rho, std::abs(v));
  }
  // Offset of the target beyond the estimate: a band-edge cluster (clean
  // circuits) needs it tiny to separate the cluster; elsewhere a larger one
  // keeps A - sigma I well conditioned for the eigenpairs not nearest sigma
  // (at 1e-8 their residuals were ~1e-8 on a disordered chain).
  const double offset = o.si_offset > 0 ? o.si_offset : (cx.clean ? 1e-8 : 1e-3);
  constexpr double kReal = 0.05;  // |Im| <= kReal |mu|: reached from the real axis
  std::vector<double> signs;
  std::vector<cd> complex_targets;
  for (cd v : est) {
    if (std::abs(v.imag()) <= kReal * std::abs(v)) {
      const double sg = v.real() < 0 ? -1.0 : 1.0;
      if (std::find(signs.begin(), signs.end(), sg) == signs.end()) signs.push_back(sg);
    } else if (v.imag() > 0 && complex_targets.size() < 4) {
      bool near = false;
      for (cd w : complex_targets) near = near || std::abs(v - w) <= 0.05 * std::abs(v);
      if (!near) complex_targets.push_back(v);
    }
  }
  if (signs.empty() && complex_targets.empty()) signs.push_back(1.0);
  // The targets' results, merged below.
  struct Found {
    cd sigma;
    bool complex;
    std::vector<Eig> eigs;
  };
  std::vector<Found> found;
  for (double sg : signs) {
    StageSpec sp = base_spec(o, nev);
    sp.method = "shift-invert";
    sp.shift_invert = true;
    sp.prefix = o.options_prefix + "si_";
    sp.sigma = sg * rho * (1.0 + offset);
    StageOut st;
    for (int attempt = 0; attempt < 4; ++attempt) {
      st = run_stage(A, sp);
      cx.record(st);
      double m = 0.0;
      for (const Eig& e : st.eigs) m = std::max(m, std::abs(e.mu));
      // The target must lie beyond the edge: if not, move it out and redo.
      if (attempt < 3 && m > std::abs(sp.sigma)) {
        sp.sigma = sg * m * (1.0 + offset);
        continue;
      }
      break;
    }
    if (st.info.converged < st.info.requested)
      throw SolverError("shift-invert did not converge: " + stage_summary(st));
    found.push_back({cd(sp.sigma, 0.0), false, st.eigs});
  }
  const bool can_complex = banded_applies(A);
  if (!complex_targets.empty() && !can_complex)
    r.warning = std::string(operator_name(A.op)) +
                ": complex targets need the banded solver (too few rows per rank); searched the real axis only";
  for (cd c : can_complex ? complex_targets : std::vector<cd>{}) {
    const cd sigma = c * (1.0 + offset);
    UniqueMat Q;
    TORAL_PCALL(make_quadratic_inverse(A.mat(), sigma, Q.out()));
    StageSpec sp = base_spec(o, 2);  // the conjugate pair nearest sigma
    sp.method = "shift-invert";
    sp.power = 1;
    sp.prefix = o.options_prefix + "sq_";
    sp.custom = Q.get();
    sp.target = std::abs(sigma);
    StageOut st = run_stage(A, sp);
    cx.record(st);
    if (st.info.converged == 0)
      throw SolverError("shift-invert (complex target) did not converge: " + stage_summary(st));
    found.push_back({sigma, true, st.eigs});
  }
  // Merge. Each eigenvalue belongs to the target nearest to it (distance
  // |mu - sigma|, or to sigma or its conjugate). A value found by its own
  // target is always kept: one solve returns distinct eigenpairs, however
  // close (a band-edge cluster at L = 1e5 is 2e-9 apart). A value found by
  // another target is a copy if its owner's results hold a value within 1e-6
  // (relative); only then is it dropped. (Eigenvalue errors of non-normal
  // matrices exceed their residuals, so copies from two targets can differ by
  // far more than the residuals: 8e-12 for residuals 1e-14 on a 6 x 6 S.)
  auto dist = [](const Found& f, cd mu) {
    return f.complex ? std::min(std::abs(mu - f.sigma), std::abs(mu - std::conj(f.sigma))) : std::abs(mu - f.sigma);
  };
  std::vector<Eig> all;
  for (std::size_t k = 0; k < found.size(); ++k)
    for (const Eig& e : found[k].eigs) {
      std::size_t owner = k;
      for (std::size_t j = 0; j < found.size(); ++j)
        if (dist(found[j], e.mu) < dist(found[owner], e.mu)) owner = j;
      if (owner != k) {
        bool copy = false;
        for (const Eig& f : found[owner].eigs) copy = copy || std::abs(f.mu - e.mu) <= 1e-6 * std::abs(e.mu);
        for (const Eig& f : all) copy = copy || std::abs(f.mu - e.mu) <= 1e-6 * std::abs(e.mu);
        if (copy) continue;
      }
      all.push_back(e);
    }
  std::stable_sort(all.begin(), all.end(), by_modulus);
  r.eigs = std::move(all);
  // Every estimate above the K-th value found must have been reached.
  if (!r.eigs.empty()) {
    const double kth = std::abs(r.eigs[std::min<std::size_t>(r.eigs.size(), static_cast<std::size_t>(nev)) - 1].mu);
    for (cd v : est) {
      if (std::abs(v) <= kth * (1 + 1e-3)) continue;
      bool hit = false;
      for (const Eig& e : r.eigs) hit = hit || std::abs(e.mu - v) <= 1e-2 * std::abs(v);
      if (!hit) {
        std::ostringstream w;
        w << operator_name(A.op) << ": the Krylov-Schur estimate (" << v.real() << ", " << v.imag()
          << ") of a top eigenvalue was not reached by shift-invert";
        r.warning += (r.warning.empty() ? "" : "; ") + w.str();
      }
    }
  }
  return r;
}

OpOutcome solve_operator(Context& cx, int nev) {
  const KrylovOptions& o = cx.o;
  const KrylovPolicy pol = o.policy;
  if (pol == KrylovPolicy::ShiftInvert || (pol == KrylovPolicy::Auto && cx.clean)) {
    // Short plain probe: directions and size of the top, outliers above a band.
    StageSpec sp = base_spec(o, nev);
    sp.method = "probe";
    sp.power = 1;
    sp.max_it = std::min(3, o.max_it);
    StageOut probe = run_stage(*cx.kop, sp);
    cx.record(probe);
    return shift_invert(cx, probe, nev);
  }
  StageOut ks = run_stage(*cx.kop, base_spec(o, nev));
  cx.record(ks);
  if (ks.info.converged >= ks.info.requested) {
    OpOutcome r;
    r.eigs = ks.eigs;
    return r;
  }
  if (pol == KrylovPolicy::Largest) throw SolverError("Krylov-Schur did not converge: " + stage_summary(ks));
  return shift_invert(cx, ks, nev);
}

// Spectral radius of the bulk (L -> infinity ring) of a clean circuit, from
// the Bloch blocks of its gates: the band edge the top of a large clean
// lattice approaches.
double bulk_radius(const GateSource& g, std::int64_t t) {
  Circuit c;
  c.L = 2;
  c.boundary = Boundary::Periodic;
  c.bonds = {g.bond(0, t), g.bond(0, t)};
  if (g.has_site_layer) c.sites = {g.site(0, t), g.site(0, t)};
  return std::exp(bulk_limit(c, 2, 1e-10).lambda_max);
}

}  // namespace

KrylovResult krylov_top(MPI_Comm comm, const GateSource& g, const KrylovOptions& o) {
  const double t0 = MPI_Wtime();
  KrylovResult res;
  try {
    if (!slepc_ready()) throw SolverError("krylov_top: SlepcInitialize has not been called");
    if (o.policy != KrylovPolicy::Auto && o.policy != KrylovPolicy::Largest && o.policy != KrylovPolicy::ShiftInvert)
      throw InvalidInput("krylov_top: policy " + std::to_string(static_cast<int>(o.policy)) +
                                  " (expected Auto, Largest or ShiftInvert)");
    if (o.si_solver != ShiftInvertSolver::Banded && o.si_solver != ShiftInvertSolver::Mumps)
      throw InvalidInput("krylov_top: si_solver " + std::to_string(static_cast<int>(o.si_solver)) +
                                  " (expected Banded or Mumps)");
    if (o.nev < 1) throw InvalidInput("krylov_top: nev must be >= 1");
    if (o.power < 1 || o.power % 2 == 0)
      throw InvalidInput("krylov_top: power must be odd and >= 1 (an even power merges mu and -mu)");
    if (!(o.tol > 0) || o.max_it < 1)
      throw InvalidInput("krylov_top: tol must be > 0 and max_it >= 1");
    if (!g.time_periodic)
      throw InvalidInput(
          "krylov_top: gates are redrawn every period (time_periodic = false): there is no "
          "one-period eigenproblem; use tangent_top");
    const bool clean = g.translation_invariant;
    if (clean && g.boundary == Boundary::Periodic && o.policy == KrylovPolicy::Auto)
      throw InvalidInput(
          "krylov_top: clean periodic ring: its top is a near-continuum (Krylov-Schur does not "
          "converge); bloch_spectrum is exact there");
    const bool pos = g.position_class && !g.has_site_layer;
    double rho_bulk = 0.0;
    collective_phase(comm, [&] {
      if (clean && o.policy != KrylovPolicy::Largest) rho_bulk = bulk_radius(g, o.t);
    });
    Context cx{o, nullptr, {}, clean, rho_bulk, res.stages, res.iterations};
    const int K = o.nev;
    const std::vector<Operator> ops =
        pos ? std::vector<Operator>{Operator::M, Operator::MInverse} : std::vector<Operator>{Operator::S};
    // Position class: the top K of S is the top K of the merged lists of M and
    // M^-1. Ask each for ceil(K/2) first (enough when spec(M) is closed under
    // inversion, as for many circuits), and for K from an operator whose
    // smallest computed value still lies above the merged K-th value.
    std::vector<int> need(ops.size(), pos ? (K + 1) / 2 : K), asked(ops.size(), 0);
    std::vector<OpOutcome> outs(ops.size());
    const double slack = std::max(1e3 * o.tol, 1e-12);  // exponents equal within accuracy
    for (int round = 0; round < 2; ++round) {
      for (std::size_t q = 0; q < ops.size(); ++q) {
        if (need[q] <= asked[q]) continue;
        // Matrix-free products for the Krylov-Schur stage where every rank
        // owns >= 2 sites; the assembled matrix (same layout) only when a
        // stage needs it (shift-invert, or too few sites per rank).
        DistMatrix F, A;
        const Operator op = ops[q];
        int size = 1;
        MPI_Comm_size(comm, &size);
        if (g.L >= 2 * size) F = make_layer_operator(comm, g, o.t, op);
        cx.assembled = [&A, &comm, &g, &o, op]() -> const DistMatrix& {
          if (!A.A) A = assemble_distributed(comm, g, o.t, op, Layout::Interleaved);
          return A;
        };
        cx.kop = F.A ? &F : &cx.assembled();
        outs[q] = solve_operator(cx, need[q]);
        cx.kop = nullptr;
        cx.assembled = {};
        asked[q] = need[q];
      }
      std::vector<double> lam;
      for (const auto& out : outs)
        for (const Eig& e : out.eigs) lam.push_back(std::log(std::abs(e.mu)));
      std::sort(lam.begin(), lam.end(), std::greater<double>());
      if (lam.size() < static_cast<std::size_t>(K)) {
        for (std::size_t q = 0; q < ops.size(); ++q) need[q] = K;
        continue;
      }
      const double T = lam[static_cast<std::size_t>(K) - 1];
      bool again = false;
      for (std::size_t q = 0; q < ops.size(); ++q) {
        if (asked[q] >= K || outs[q].eigs.empty()) continue;
        const double last = std::log(std::abs(outs[q].eigs.back().mu));
        if (last > T + slack) need[q] = K, again = true;
      }
      if (!again) break;
    }
    bool used_si = false;
    std::vector<std::string> warnings;
    for (const auto& out : outs) {
      used_si = used_si || out.used_si;
      res.converged += static_cast<std::int64_t>(out.eigs.size());
      if (!out.warning.empty()) warnings.push_back(out.warning);
    }
    res.method = used_si ? KrylovMethod::ShiftInvert : KrylovMethod::KrylovSchur;
    // Merge: exponents of S from every operator, with multiplicity.
    struct Item {
      double lam;
      cd mu;
      double resid;
      std::size_t part;
    };
    std::vector<Item> items;
    for (std::size_t q = 0; q < outs.size(); ++q)
      for (const Eig& e : outs[q].eigs) items.push_back({std::log(std::abs(e.mu)), e.mu, e.resid, q});
    std::stable_sort(items.begin(), items.end(), [](const Item& a, const Item& b) { return a.lam > b.lam; });
    if (items.size() < static_cast<std::size_t>(K))
      throw SolverError("krylov_top: only " + std::to_string(items.size()) + " of " +
                               std::to_string(K) + " eigenvalues converged");
    for (std::size_t i = 0; i < static_cast<std::size_t>(K); ++i) {
      res.exponents.push_back(items[i].lam);
      res.eigenvalues.push_back(items[i].mu);
      res.source.push_back(operator_name(ops[items[i].part]));
      res.residuals.push_back(items[i].resid);
      res.max_residual = std::max(res.max_residual, items[i].resid);
    }
    // Cluster report on the operator that holds lambda_max.
    res.lambda_max = items.front().lam;
    const std::vector<Eig>& top = outs[items.front().part].eigs;
    std::int64_t distinct = 0, inside = 0;
    double lowest = res.lambda_max;
    for (const Eig& e : top) {
      if (e.mu.imag() < 0) continue;  // a conjugate pair counts once
      ++distinct;
      const double l = std::log(std::abs(e.mu));
      if (res.lambda_max - l <= o.cluster_tol) {
        ++inside;
        lowest = std::min(lowest, l);
      }
    }
    res.cluster_count = inside;
    res.cluster_spread = res.lambda_max - lowest;
    res.clustered = inside >= 2;
    res.cluster_saturated = res.clustered && inside == distinct;
    res.ok = true;
    std::ostringstream msg;
    if (res.clustered)
      msg << "clustered top: " << inside << (res.cluster_saturated ? " or more" : "")
          << " eigenvalues within " << o.cluster_tol << " of lambda_max (spread " << res.cluster_spread
          << "): lambda_max is a band edge, the values below it are not individually meaningful";
    if (res.max_residual > o.tol) {
      std::ostringstream w;
      w << "largest relative residual " << res.max_residual << " exceeds tol " << o.tol;
      warnings.push_back(w.str());
    }
    for (const auto& w : warnings) msg << (msg.tellp() > 0 ? "; " : "") << "warning: " << w;
    res.message = msg.str();
  } catch (const std::exception& e) {
    res.ok = false;
    res.message = e.what();
    if (!res.stages.empty()) {
      const KrylovStage& s = res.stages.back();
      res.message += " [last stage: " + s.op + " " + s.method + ", " + std::to_string(s.converged) +
                     " of " + std::to_string(s.requested) + " converged, " +
                     std::to_string(s.iterations) + " restarts, " + s.reason + "]";
    }
  }
  res.wall_seconds = MPI_Wtime() - t0;
  return res;
}

}  // namespace toral

#include "banded.hpp"
#include "errors.hpp"

#include "petsc_util.hpp"

#include <complex>
#define lapack_complex_float std::complex<float>
#define lapack_complex_double std::complex<double>
#include <lapacke.h>
#include <mpi.h>

#include <algorithm>
#include <cstdlib>
#include <exception>
#include <string>
#include <vector>

namespace toral {
namespace {

using cd = std::complex<double>;

// LAPACK and MPI by scalar type.
inline lapack_int gbtrf(lapack_int m, int b, double* ab, int ldab, lapack_int* piv) {
  return LAPACKE_dgbtrf(LAPACK_COL_MAJOR, m, m, b, b, ab, ldab, piv);
}
inline lapack_int gbtrf(lapack_int m, int b, cd* ab, int ldab, lapack_int* piv) {
  return LAPACKE_zgbtrf(LAPACK_COL_MAJOR, m, m, b, b, ab, ldab, piv);
}
inline lapack_int gbtrs(lapack_int m, int b, lapack_int nrhs, const double* ab, int ldab, const lapack_int* piv,
                        double* x) {
  return LAPACKE_dgbtrs(LAPACK_COL_MAJOR, 'N', m, b, b, nrhs, ab, ldab, piv, x, m);
}
inline lapack_int gbtrs(lapack_int m, int b, lapack_int nrhs, const cd* ab, int ldab, const lapack_int* piv,
                        cd* x) {
  return LAPACKE_zgbtrs(LAPACK_COL_MAJOR, 'N', m, b, b, nrhs, ab, ldab, piv, x, m);
}
inline lapack_int getrf(int n, double* a, lapack_int* piv) { return LAPACKE_dgetrf(LAPACK_COL_MAJOR, n, n, a, n, piv); }
inline lapack_int getrf(int n, cd* a, lapack_int* piv) { return LAPACKE_zgetrf(LAPACK_COL_MAJOR, n, n, a, n, piv); }
inline lapack_int getrs(int n, const double* a, const lapack_int* piv, double* x) {
  return LAPACKE_dgetrs(LAPACK_COL_MAJOR, 'N', n, 1, a, n, piv, x, n);
}
inline lapack_int getrs(int n, const cd* a, const lapack_int* piv, cd* x) {
  return LAPACKE_zgetrs(LAPACK_COL_MAJOR, 'N', n, 1, a, n, piv, x, n);
}
inline MPI_Datatype mpi_type(double) { return MPI_DOUBLE; }
inline MPI_Datatype mpi_type(cd) { return MPI_C_DOUBLE_COMPLEX; }

template <class T>
struct Banded {
  MPI_Comm comm = MPI_COMM_NULL;
  int rank = 0, size = 1;
  PetscInt n = 0, r0 = 0, r1 = 0, m = 0;
  int b = 0;                       // half-bandwidth (cyclic)
  int ldab = 0;                    // 3b + 1
  std::vector<T> ab;               // band LU of A_p, column-major (LAPACK)
  std::vector<lapack_int> ipiv;
  std::vector<T> V, W;             // spikes, m x b column-major
  std::vector<T> R;                // reduced system LU, column-major N x N
  std::vector<lapack_int> rpiv;
  int N = 0;                       // 2 b size
  std::vector<T> g, red, all;      // work
  std::string error;               // set-up failure (reported via PETSc)
};

// Throws on a LAPACK failure.
void lapack_check(lapack_int info, const char* what) {
  if (info < 0) throw SolverError(std::string(what) + ": illegal argument " + std::to_string(-info));
  if (info > 0)
    throw SolverError(std::string(what) + ": exactly singular pivot " + std::to_string(info) +
                             " (the shifted matrix or one of its diagonal blocks is singular)");
}

// Factorises Pm - shift I.
template <class T>
void setup(Banded<T>& s, Mat Pm, T shift) {
  s.comm = PetscObjectComm(reinterpret_cast<PetscObject>(Pm));
  MPI_Comm_rank(s.comm, &s.rank);
  MPI_Comm_size(s.comm, &s.size);
  PetscInt nn, mm;
  if (MatGetSize(Pm, &nn, &mm) || MatGetOwnershipRange(Pm, &s.r0, &s.r1))
    throw SolverError("banded: cannot query the matrix");
  s.n = nn;
  s.m = s.r1 - s.r0;
  // Pass 1: the cyclic half-bandwidth.
  struct E {
    PetscInt r;
    PetscInt off;
    double v;
  };
  std::vector<E> ents;
  int bl = 0;
  for (PetscInt r = s.r0; r < s.r1; ++r) {
    PetscInt nc;
    const PetscInt* c;
    const PetscScalar* x;
    if (MatGetRow(Pm, r, &nc, &c, &x)) throw SolverError("banded: MatGetRow failed");
    for (PetscInt k = 0; k < nc; ++k) {
      if (x[k] == 0.0) continue;
      PetscInt off = c[k] - r;
      if (off > s.n / 2) off -= s.n;
      if (off < -(s.n / 2)) off += s.n;
      bl = std::max<int>(bl, static_cast<int>(off < 0 ? -off : off));
      ents.push_back({r, off, x[k]});
    }
    MatRestoreRow(Pm, r, &nc, &c, &x);
  }
  int mmin = static_cast<int>(s.m);
  MPI_Allreduce(&bl, &s.b, 1, MPI_INT, MPI_MAX, s.comm);
  MPI_Allreduce(MPI_IN_PLACE, &mmin, 1, MPI_INT, MPI_MIN, s.comm);
  s.b = std::max(s.b, 1);
  const int b = s.b;
  if (mmin < 2 * b)
    throw SolverError("banded: a rank owns " + std::to_string(mmin) + " rows, fewer than 2b = " +
                             std::to_string(2 * b) + " (use fewer ranks or -st_pc_type lu)");
  s.N = 2 * b * s.size;
  if (s.N > 8192)
    throw SolverError("banded: reduced system of size " + std::to_string(s.N) +
                             " is too large (2 b P <= 8192); use -st_pc_type lu with a parallel package");
  const lapack_int m = static_cast<lapack_int>(s.m);
  // Local phase: any failure is agreed on by all ranks before the next collective.
  std::string local_error;
  try {
    s.ldab = 3 * b + 1;
    s.ab.assign(static_cast<std::size_t>(s.ldab) * s.m, T(0));
    std::vector<T> B(static_cast<std::size_t>(b) * b, T(0)), C(static_cast<std::size_t>(b) * b, T(0));
    for (const E& e : ents) {
      const PetscInt i = e.r - s.r0;      // local row
      const PetscInt j = i + e.off;       // local column, unwrapped
      if (j >= 0 && j < s.m) {
        // LAPACK band storage: AB(kl + ku + i - j, j) = A(i, j), kl = ku = b.
        s.ab[static_cast<std::size_t>(j) * s.ldab + (2 * b + i - j)] += T(e.v);
      } else if (j >= s.m) {  // next block, its column j - m
        const PetscInt k = j - s.m, ib = i - (s.m - b);
        if (k >= b || ib < 0) throw SolverError("banded: entry outside the coupling blocks");
        B[static_cast<std::size_t>(k) * b + ib] += e.v;  // column-major b x b
      } else {  // previous block, its column (j + b) among its last b
        const PetscInt k = j + b;
        if (k < 0 || i >= b) throw SolverError("banded: entry outside the coupling blocks");
        C[static_cast<std::size_t>(k) * b + i] += e.v;
      }
    }
    for (PetscInt i = 0; i < s.m; ++i) s.ab[static_cast<std::size_t>(i) * s.ldab + 2 * b] -= shift;
    s.ipiv.resize(s.m);
    lapack_check(gbtrf(m, b, s.ab.data(), s.ldab, s.ipiv.data()), "banded: band LU");
    // Spikes.
    s.V.assign(static_cast<std::size_t>(s.m) * b, T(0));
    s.W.assign(static_cast<std::size_t>(s.m) * b, T(0));
    for (int k = 0; k < b; ++k)
      for (int i = 0; i < b; ++i) {
        s.V[static_cast<std::size_t>(k) * s.m + (s.m - b + i)] = B[static_cast<std::size_t>(k) * b + i];
        s.W[static_cast<std::size_t>(k) * s.m + i] = C[static_cast<std::size_t>(k) * b + i];
      }
    lapack_check(gbtrs(m, b, b, s.ab.data(), s.ldab, s.ipiv.data(), s.V.data()), "banded: band solve");
    lapack_check(gbtrs(m, b, b, s.ab.data(), s.ldab, s.ipiv.data(), s.W.data()), "banded: band solve");
  } catch (const std::exception& e) {
    local_error = e.what();
  }
  agree_on_error(s.comm, local_error.empty() ? 0 : 3, local_error);
  // The four b x b corners of the spikes: Vt, Vb, Wt, Wb (column-major each).
  std::vector<T> mine(static_cast<std::size_t>(4) * b * b);
  for (int k = 0; k < b; ++k)
    for (int i = 0; i < b; ++i) {
      const std::size_t o = static_cast<std::size_t>(k) * b + i;
      mine[o] = s.V[static_cast<std::size_t>(k) * s.m + i];
      mine[b * b + o] = s.V[static_cast<std::size_t>(k) * s.m + (s.m - b + i)];
      mine[2 * b * b + o] = s.W[static_cast<std::size_t>(k) * s.m + i];
      mine[3 * b * b + o] = s.W[static_cast<std::size_t>(k) * s.m + (s.m - b + i)];
    }
  std::vector<T> every(mine.size() * s.size);
  MPI_Allgather(mine.data(), static_cast<int>(mine.size()), mpi_type(T()), every.data(),
                static_cast<int>(mine.size()), mpi_type(T()), s.comm);
  // Unknowns: t_p = 2bp + [0, b), d_p = 2bp + b + [0, b).
  const int N = s.N, P = s.size;
  s.R.assign(static_cast<std::size_t>(N) * N, T(0));
  auto at = [&](int row, int col) -> T& { return s.R[static_cast<std::size_t>(col) * N + row]; };
  for (int p = 0; p < P; ++p) {
    const T* blk = every.data() + static_cast<std::size_t>(p) * 4 * b * b;
    const int nx = (p + 1) % P, pv = (p + P - 1) % P;
    for (int i = 0; i < b; ++i) {
      at(2 * b * p + i, 2 * b * p + i) += 1.0;
      at(2 * b * p + b + i, 2 * b * p + b + i) += 1.0;
      for (int k = 0; k < b; ++k) {
        const std::size_t o = static_cast<std::size_t>(k) * b + i;
        at(2 * b * p + i, 2 * b * nx + k) += blk[o];                   // Vt t_next
        at(2 * b * p + b + i, 2 * b * nx + k) += blk[b * b + o];       // Vb t_next
        at(2 * b * p + i, 2 * b * pv + b + k) += blk[2 * b * b + o];   // Wt d_prev
        at(2 * b * p + b + i, 2 * b * pv + b + k) += blk[3 * b * b + o];  // Wb d_prev
      }
    }
  }
  s.rpiv.resize(N);
  lapack_check(getrf(N, s.R.data(), s.rpiv.data()), "banded: reduced system LU");
  s.g.resize(s.m);
  s.red.resize(2 * b);
  s.all.resize(N);
}

template <class T, class In>
void solve(Banded<T>& s, const In* f, T* x) {
  const int b = s.b;
  const lapack_int m = static_cast<lapack_int>(s.m);
  for (PetscInt i = 0; i < s.m; ++i) s.g[i] = T(f[i]);
  lapack_check(gbtrs(m, b, 1, s.ab.data(), s.ldab, s.ipiv.data(), s.g.data()), "banded: band solve");
  for (int i = 0; i < b; ++i) {
    s.red[i] = s.g[i];
    s.red[b + i] = s.g[s.m - b + i];
  }
  MPI_Allgather(s.red.data(), 2 * b, mpi_type(T()), s.all.data(), 2 * b, mpi_type(T()), s.comm);
  lapack_check(getrs(s.N, s.R.data(), s.rpiv.data(), s.all.data()), "banded: reduced system solve");
  const int P = s.size, nx = (s.rank + 1) % P, pv = (s.rank + P - 1) % P;
  const T* tn = s.all.data() + 2 * b * nx;
  const T* dp = s.all.data() + 2 * b * pv + b;
  for (PetscInt i = 0; i < s.m; ++i) {
    T v = s.g[i];
    for (int k = 0; k < b; ++k)
      v -= s.V[static_cast<std::size_t>(k) * s.m + i] * tn[k] + s.W[static_cast<std::size_t>(k) * s.m + i] * dp[k];
    x[i] = v;
  }
}

PetscErrorCode pc_setup(PC pc) {
  Banded<double>* s;
  Mat A, P;
  PetscCall(PCShellGetContext(pc, &s));
  PetscCall(PCGetOperators(pc, &A, &P));
  try {
    *s = Banded<double>{};
    setup(*s, P, 0.0);
  } catch (const std::exception& e) {
    SETERRQ(PetscObjectComm(reinterpret_cast<PetscObject>(pc)), PETSC_ERR_LIB, "%s", e.what());
  }
  return 0;
}

PetscErrorCode pc_apply(PC pc, Vec x, Vec y) {
  Banded<double>* s;
  PetscCall(PCShellGetContext(pc, &s));
  return with_local_arrays(x, y, [s](const PetscScalar* xa, PetscScalar* ya) { solve(*s, xa, ya); });
}

PetscErrorCode pc_destroy(PC pc) {
  Banded<double>* s;
  PetscCall(PCShellGetContext(pc, &s));
  delete s;
  return 0;
}

struct Quad {
  Banded<cd> f;
  double im = 1.0;
};

PetscErrorCode quad_mult(Mat S, Vec x, Vec y) {
  Quad* q;
  PetscCall(MatShellGetContext(S, &q));
  return with_local_arrays(x, y, [q](const PetscScalar* xa, PetscScalar* ya) {
    std::vector<cd> z(static_cast<std::size_t>(q->f.m));
    solve(q->f, xa, z.data());
    for (PetscInt i = 0; i < q->f.m; ++i) ya[i] = z[static_cast<std::size_t>(i)].imag() / q->im;
  });
}

PetscErrorCode quad_destroy(Mat S) {
  Quad* q;
  PetscCall(MatShellGetContext(S, &q));
  delete q;
  return 0;
}

}  // namespace

PetscErrorCode make_quadratic_inverse(Mat A, std::complex<double> sigma, Mat* shell) {
  auto* q = new Quad;
  try {
    if (sigma.imag() == 0.0) throw SolverError("make_quadratic_inverse: sigma must be complex");
    q->im = sigma.imag();
    setup(q->f, A, sigma);
  } catch (...) {
    delete q;
    throw;
  }
  PetscInt m, n, M, N;
  PetscCall(MatGetLocalSize(A, &m, &n));
  PetscCall(MatGetSize(A, &M, &N));
  PetscCall(MatCreateShell(PetscObjectComm(reinterpret_cast<PetscObject>(A)), m, n, M, N, q, shell));
  PetscCall(MatShellSetOperation(*shell, MATOP_MULT, reinterpret_cast<void (*)(void)>(quad_mult)));
  PetscCall(MatShellSetOperation(*shell, MATOP_DESTROY, reinterpret_cast<void (*)(void)>(quad_destroy)));
  return 0;
}

PetscErrorCode pc_set_banded(PC pc) {
  PetscCall(PCSetType(pc, PCSHELL));
  auto* s = new Banded<double>;
  PetscCall(PCShellSetContext(pc, s));
  PetscCall(PCShellSetSetUp(pc, pc_setup));
  PetscCall(PCShellSetApply(pc, pc_apply));
  PetscCall(PCShellSetDestroy(pc, pc_destroy));
  PetscCall(PCShellSetName(pc, "toral-banded"));
  return 0;
}

}  // namespace toral

// Bloch decomposition of translation-invariant brick-wall circuits.
//
// Derivation of the one-period Bloch matrix M(z) (checked in
// tests/test_bloch.cpp against the dense matrix of assemble_period):
//
// Cell j holds x_j = site 2j and y_j = site 2j+1; a plane wave has
// X_j = z^j X, Y_j = z^j Y with X = (q_x, p_x), Y = (q_y, p_y) and z = e^{ik}.
//  * Even bond 2j acts on (a, b) = (x_j, y_j), so on (X, Y) it is G itself.
//  * Odd bond 2j+1 acts on (a, b) = (y_j, x_{j+1}). With G = [[G11, G12],
//    [G21, G22]] in 2x2 blocks on (a, b):
//      Y'_j     = G11 Y_j + G12 X_{j+1}  ->  Y' = G11 Y + z G12 X
//      X'_{j+1} = G21 Y_j + G22 X_{j+1}  ->  X' = G21 Y / z + G22 X
//    so on (X, Y) the odd layer is [[G22, G21/z], [z G12, G11]].
//    For a position gate A on (q_a, q_b) the same step gives, on (q_x, q_y),
//    [[A11, A10/z], [z A01, A00]].
//  * The one-site layer is blockdiag(g, g).
// M(z) = Site * Odd(z) * Even. For L = 2 the odd bond is (1, 0), which is the
// z = 1 case of the same formula.
//
// S is block-diagonalised by the Fourier transform over cells, so its
// spectrum is the union over the L/2 ring momenta of the spectra of M(z).
// Position class: S = M (+) M^-T; the momentum block at z has the Bloch
// matrix M(conj z)^-T = conj(M(z))^-T, whose eigenvalue moduli are
// 1/|mu_j(z)|, so each k gives {ln|mu_j|} u {-ln|mu_j|}: 4 exponents. In the
// general case M(z) is 4x4 and gives the 4 exponents directly. The gates are
// real, so M(conj z) = conj(M(z)) and the exponents at k and -k coincide.
#include "bloch.hpp"
#include "errors.hpp"

#include "bloch_exact.hpp"

#include <complex>
#define lapack_complex_float std::complex<float>
#define lapack_complex_double std::complex<double>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_integration.h>
#include <gsl/gsl_min.h>
#include <lapacke.h>

#include <algorithm>
#include <cmath>
#include <exception>
#include <functional>
#include <limits>
#include <memory>
#include <numbers>
#include <sstream>
#include <numeric>
#include <stdexcept>
#include <string>
#include <tuple>
#include <utility>
#include <vector>

namespace toral {
namespace {

using cd = std::complex<double>;
constexpr double kPi = std::numbers::pi;
constexpr double kEps = std::numeric_limits<double>::epsilon();

// The gates of one unit cell, taken from a translation-invariant circuit.
struct CellGates {
  bool position = false;  // position class: 2x2 M(z) on (q_x, q_y)
  Mat2 A;                 // position gate (position class only)
  Mat4 G;                 // bond gate on (q_a, p_a, q_b, p_b)
  bool has_site = false;
  Mat2 g;  // one-site gate
  int dim() const { return position ? 2 : 4; }
};

// Checks what the Bloch decomposition needs and extracts the cell gates.
// Only bond 0 and site 0 are validated in full: translation invariance makes
// the rest identical, and this keeps the check O(L) with a tiny constant
// (Circuit::validate would run L exact symplectic checks).
CellGates extract_gates(const Circuit& c, const std::string& who) {
  if (c.L < 2) throw ModelError(who + ": L = " + std::to_string(c.L) + ", needs at least 2 sites");
  if (static_cast<std::int64_t>(c.bonds.size()) != c.bond_count())
    throw ModelError(who + ": " + std::to_string(c.bonds.size()) + " bond gates for " +
                     std::to_string(c.bond_count()) + " bonds");
  if (!c.sites.empty() && static_cast<std::int64_t>(c.sites.size()) != c.L)
    throw ModelError(who + ": " + std::to_string(c.sites.size()) +
                     " site gates for L = " + std::to_string(c.L));
  if (!c.translation_invariant()) {
    std::string what = "circuit";
    for (std::size_t b = 1; b < c.bonds.size(); ++b)
      if (!(c.bonds[b] == c.bonds[0])) {
        what = "bond " + std::to_string(b) + " differs from bond 0";
        break;
      }
    if (what == "circuit")
      for (std::size_t i = 1; i < c.sites.size(); ++i)
        if (c.sites[i] != c.sites[0]) {
          what = "site " + std::to_string(i) + " differs from site 0";
          break;
        }
    throw ModelError(who + ": circuit is not translation invariant (" + what +
                     "); the Bloch decomposition needs the same gate on every bond and site");
  }
  CellGates cg;
  const BondGate& b0 = c.bonds[0];
  if (b0.kind == BondKind::Position) {
    validate_position_gate(b0.A, "bond 0");
    if (!(embed_position_gate(b0.A) == b0.G))
      throw ModelError("bond 0: position gate " + to_string(b0.A) +
                       " does not match its 4x4 embedding " + to_string(b0.G));
  } else {
    validate_symplectic_gate(b0.G, "bond 0");
  }
  cg.G = b0.G;
  cg.A = b0.A;
  cg.has_site = c.has_site_layer();
  if (cg.has_site) {
    validate_site_gate(c.sites[0], "site 0");
    cg.g = c.sites[0];
  }
  cg.position = (b0.kind == BondKind::Position) && !cg.has_site;
  return cg;
}

// M(z), row-major dim x dim, into m (size >= 16).
void build_matrix(const CellGates& cg, cd z, cd* m) {
  const cd zi = 1.0 / z;
  if (cg.position) {
    const Mat2& A = cg.A;
    const cd O[2][2] = {{double(A(1, 1)), double(A(1, 0)) * zi},
                        {z * double(A(0, 1)), double(A(0, 0))}};
    for (int i = 0; i < 2; ++i)
      for (int j = 0; j < 2; ++j)
        m[i * 2 + j] = O[i][0] * double(A(0, j)) + O[i][1] * double(A(1, j));
    return;
  }
  const Mat4& G = cg.G;
  cd O[4][4];
  for (int i = 0; i < 2; ++i)
    for (int j = 0; j < 2; ++j) {
      O[i][j] = double(G(2 + i, 2 + j));       // G22
      O[i][2 + j] = double(G(2 + i, j)) * zi;  // G21 / z
      O[2 + i][j] = z * double(G(i, 2 + j));   // z G12
      O[2 + i][2 + j] = double(G(i, j));       // G11
    }
  cd T[4][4];
  for (int i = 0; i < 4; ++i)
    for (int j = 0; j < 4; ++j) {
      cd s = 0.0;
      for (int l = 0; l < 4; ++l) s += O[i][l] * double(G(l, j));
      T[i][j] = s;
    }
  if (!cg.has_site) {
    for (int i = 0; i < 4; ++i)
      for (int j = 0; j < 4; ++j) m[i * 4 + j] = T[i][j];
    return;
  }
  // blockdiag(g, g) * T
  for (int blk = 0; blk < 2; ++blk)
    for (int i = 0; i < 2; ++i)
      for (int j = 0; j < 4; ++j)
        m[(2 * blk + i) * 4 + j] =
            double(cg.g(i, 0)) * T[2 * blk][j] + double(cg.g(i, 1)) * T[2 * blk + 1][j];
}

// Eigenvalues of a small complex matrix with LAPACK zgeevx (balanced). With
// `conditions` it also computes the reciprocal eigenvalue condition numbers
// and turns them into error bounds on ln|mu|. Workspace is allocated once.
class SmallEig {
 public:
  SmallEig(int n, bool conditions) : n_(n), cond_(conditions) {
    a_.resize(n * n);
    w_.resize(n);
    vl_.resize(n * n);
    vr_.resize(n * n);
    scale_.resize(n);
    rconde_.resize(n);
    rcondv_.resize(n);
    rwork_.resize(2 * n);
    cd wq;
    lapack_int ilo, ihi;
    double abnrm;
    const lapack_int info =
        LAPACKE_zgeevx_work(LAPACK_COL_MAJOR, 'B', jv(), jv(), sense(), n_, a_.data(), n_,
                            w_.data(), vl_.data(), n_, vr_.data(), n_, &ilo, &ihi, scale_.data(),
                            &abnrm, rconde_.data(), rcondv_.data(), &wq, -1, rwork_.data());
    if (info != 0)
      throw SolverError("zgeevx workspace query failed, info = " + std::to_string(info));
    work_.resize(static_cast<std::size_t>(std::max(1.0, wq.real())) + 2 * n);
    if (cond_) {
      cd sq[16];
      double sv[4];
      svd_rwork_.resize(5 * n);
      const lapack_int i2 = LAPACKE_zgesvd_work(LAPACK_COL_MAJOR, 'N', 'N', n_, n_, sq, n_, sv,
                                                nullptr, 1, nullptr, 1, &wq, -1, svd_rwork_.data());
      if (i2 != 0)
        throw SolverError("zgesvd workspace query failed, info = " + std::to_string(i2));
      svd_work_.resize(static_cast<std::size_t>(std::max(1.0, wq.real())) + 2 * n);
    }
  }

  // mat is row-major n x n. Fills lam[j] = ln|mu_j| and, in condition mode,
  // err[j] = estimated absolute error of lam[j].
  void solve(const cd* mat, double* lam, double* err) {
    // Column-major copy of mat (LAPACKE's row-major path would allocate).
    for (int i = 0; i < n_; ++i)
      for (int j = 0; j < n_; ++j) a_[j * n_ + i] = mat[i * n_ + j];
    lapack_int ilo, ihi;
    double abnrm = 0.0;
    const lapack_int info = LAPACKE_zgeevx_work(
        LAPACK_COL_MAJOR, 'B', jv(), jv(), sense(), n_, a_.data(), n_, w_.data(), vl_.data(), n_,
        vr_.data(), n_, &ilo, &ihi, scale_.data(), &abnrm, rconde_.data(), rcondv_.data(),
        work_.data(), static_cast<lapack_int>(work_.size()), rwork_.data());
    if (info != 0)
      throw SolverError("zgeevx failed on a " + std::to_string(n_) + "x" +
                               std::to_string(n_) +
                               " Bloch matrix, info = " + std::to_string(info));
    for (int j = 0; j < n_; ++j) lam[j] = std::log(std::abs(w_[j]));
    if (!cond_) return;
    // Error of each eigenvalue, from two standard estimates:
    //  * LAPACK Users' Guide (3rd ed.) sec. 4.8.1.3: |mu - mu~| <~ eps ||A|| / rconde,
    //    first order, so it breaks down for (nearly) defective eigenvalues;
    //  * the Ostrowski-Elsner theorem, valid for any matrix:
    //    |mu - mu~| <= (||A|| + ||A~||)^(1-1/n) ||E||^(1/n), for a backward
    //    error ||E|| <= n eps ||A||_2 (and ||A||_2 <= sqrt(n) ||A||_1). An
    //    eigenvalue whose largest Jordan block has size p moves like
    //    ||E||^(1/p), so we use the same form r_p with exponent 1/p, where p is
    //    the numerical Jordan index of the cluster of computed eigenvalues
    //    around it (smallest p with rank (T - mu I)^p = n - cluster size, T the
    //    Schur form zgeevx leaves in A). p = n is the plain Elsner bound.
    const double dn = n_;
    const double norm2 = std::sqrt(dn) * abnrm;
    double rad[5] = {0, 0, 0, 0, 0};
    for (int p = 1; p <= n_; ++p)
      rad[p] = std::pow(2.0 * norm2, 1.0 - 1.0 / p) * std::pow(dn * kEps * norm2, 1.0 / p);
    int jordan[4] = {0, 0, 0, 0};  // Jordan index per eigenvalue, 0 = not yet known
    for (int j = 0; j < n_; ++j) {
      const double r = std::abs(w_[j]);
      const double first =
          rconde_[j] > 0.0 ? kEps * abnrm / rconde_[j] : std::numeric_limits<double>::infinity();
      // Cluster: the smallest m such that at most m computed eigenvalues lie
      // within 2 r_m of this one.
      int members[4], count = 0;
      for (int m = 1; m <= n_; ++m) {
        count = 0;
        for (int i = 0; i < n_; ++i)
          if (std::abs(w_[i] - w_[j]) <= 2.0 * rad[m]) members[count++] = i;
        if (count <= m) break;
      }
      double dmu = first;
      if (count == 2) {
        dmu = std::min(first, rad[2]);  // Jordan index 1 or 2: r_2 either way
      } else if (count > 2) {
        if (jordan[j] == 0) {
          cd mean = 0.0;
          for (int i = 0; i < count; ++i) mean += w_[members[i]];
          const int p = jordan_index(mean / double(count), count);
          for (int i = 0; i < count; ++i) jordan[members[i]] = p;
        }
        dmu = std::min(first, rad[std::max(2, jordan[j])]);
      }
      err[j] = dmu < r ? -std::log1p(-dmu / r) : std::numeric_limits<double>::infinity();
    }
  }

 private:
  // Numerical Jordan index of the eigenvalue cluster of size `count` around
  // mu, from the singular values of powers of N = T - mu I (T in a_).
  int jordan_index(cd mu, int count) {
    const int n = n_;
    double tnorm = 0.0;
    for (int i = 0; i < n * n; ++i) tnorm += std::norm(a_[i]);
    tnorm = std::max(1.0, std::sqrt(tnorm));
    cd N[16], P[16], Q[16];
    for (int i = 0; i < n * n; ++i) N[i] = a_[i];
    for (int i = 0; i < n; ++i) N[i * n + i] -= mu;
    std::copy(N, N + n * n, P);
    double scale = tnorm;
    for (int p = 1; p < count; ++p) {
      std::copy(P, P + n * n, Q);
      double sv[4];
      const lapack_int info = LAPACKE_zgesvd_work(
          LAPACK_COL_MAJOR, 'N', 'N', n, n, Q, n, sv, nullptr, 1, nullptr, 1, svd_work_.data(),
          static_cast<lapack_int>(svd_work_.size()), svd_rwork_.data());
      if (info != 0) return count;  // no rank information: assume the worst
      int small = 0;
      for (int i = 0; i < n; ++i)
        if (sv[i] <= std::sqrt(kEps) * scale) ++small;
      if (small >= count) return p;
      // P <- P * N (column-major)
      for (int c = 0; c < n; ++c)
        for (int r = 0; r < n; ++r) {
          cd acc = 0.0;
          for (int l = 0; l < n; ++l) acc += P[l * n + r] * N[c * n + l];
          Q[c * n + r] = acc;
        }
      std::copy(Q, Q + n * n, P);
      scale *= tnorm;
    }
    return count;
  }

  char jv() const { return cond_ ? 'V' : 'N'; }
  char sense() const { return cond_ ? 'E' : 'N'; }
  int n_;
  bool cond_;
  std::vector<cd> a_, w_, vl_, vr_, work_;
  std::vector<double> scale_, rconde_, rcondv_, rwork_;
  std::vector<cd> svd_work_;
  std::vector<double> svd_rwork_;
};

// The 4 exponents of S at momentum k, sorted descending, with an error
// estimate per exponent (condition mode).
struct KExponents {
  double lam[4];
  double err4[4] = {0, 0, 0, 0};  // per exponent, same order as lam
  double err = 0.0;                // max of err4
  double msum = 0.0;  // sum of ln|mu| over the eigenvalues of M(z) itself
  void sort_desc() {
    std::pair<double, double> p[4];
    for (int j = 0; j < 4; ++j) p[j] = {lam[j], err4[j]};
    std::sort(p, p + 4, [](const auto& a, const auto& b) { return a.first > b.first; });
    err = 0.0;
    for (int j = 0; j < 4; ++j) {
      lam[j] = p[j].first;
      err4[j] = p[j].second;
      err = std::max(err, err4[j]);
    }
  }
};

// Position-class blocks in closed form. M(z) = Odd(z) A has det M = det(A)^2
// = 1 and trace tau(z) = 2 A00 A11 + A10^2 / z + A01^2 z (from the block
// derivation at the top of this file), so its eigenvalues are the roots of
// mu^2 - tau mu + 1. The larger root mu1 = (tau + s) / 2 with the sign of
// s = sqrt(tau^2 - 4) that avoids cancellation, and mu2 = 1 / mu1, so the
// exponents at k are ln|mu1| (twice) and -ln|mu1| (twice) with no
// subtraction of large numbers: stable for gate entries of any size.
// Error: tau carries a rounding error dt <= 4 eps (|2 A00 A11| + A10^2 +
// A01^2); dmu1 / dtau = mu1 / s, so d ln|mu1| <= dt / max(|s|, sqrt(|mu1| dt))
// (the second form near a double root, where a 2x2 Jordan block costs
// sqrt(eps)), plus a few roundings of the final steps.
KExponents position_closed_form(const Mat2& A, double k) {
  const auto sq = [](std::int64_t a, std::int64_t b) {
    return static_cast<double>(static_cast<__int128>(a) * static_cast<__int128>(b));
  };
  const double t0 = 2.0 * sq(A(0, 0), A(1, 1)), t1 = sq(A(1, 0), A(1, 0)), t2 = sq(A(0, 1), A(0, 1));
  const cd z = std::polar(1.0, k);
  const cd tau = t0 + t1 * std::conj(z) + t2 * z;
  const double dt = 4.0 * kEps * (std::abs(t0) + t1 + t2) + kEps;
  cd s = std::sqrt(tau * tau - 4.0);
  if (std::real(std::conj(tau) * s) < 0.0) s = -s;
  const cd mu1 = 0.5 * (tau + s);
  const double a = std::log(std::abs(mu1));
  const double m = std::abs(mu1);
  const double dl = 2.0 * dt / std::max(std::abs(s), std::sqrt(m * dt)) + 8.0 * kEps * std::max(1.0, std::abs(a));
  KExponents r;
  r.lam[0] = a;
  r.lam[1] = a;
  r.lam[2] = -a;
  r.lam[3] = -a;
  for (double& e : r.err4) e = dl;
  r.msum = 0.0;  // ln|mu1| + ln|1/mu1|, exactly 0 by construction
  r.sort_desc();
  return r;
}

class BlochEvaluator {
 public:
  BlochEvaluator(const CellGates& cg, bool conditions)
      : cg_(cg), eig_(cg.dim(), conditions), cond_(conditions) {}

  KExponents at(double k) {
    if (cg_.position) return position_closed_form(cg_.A, k);
    cd m[16];
    build_matrix(cg_, std::polar(1.0, k), m);
    double l[4], e[4] = {0, 0, 0, 0};
    eig_.solve(m, l, e);
    KExponents r;
    for (int j = 0; j < 4; ++j) {
      r.lam[j] = l[j];
      r.err4[j] = e[j];
      r.msum += l[j];
    }
    r.sort_desc();
    // M(z)^H J M(z) = J: eigenvalues pair as mu, 1/conj(mu); half the
    // observed violation of that pairing is a lower bound on the error.
    const double defect = std::max(std::abs(r.lam[0] + r.lam[3]), std::abs(r.lam[1] + r.lam[2]));
    if (cond_) {
      for (double& x : r.err4) x = std::max(x, 0.5 * defect);
      r.err = std::max(r.err, 0.5 * defect);
    }
    return r;
  }

  // The two nonnegative exponents at k after imposing the exact +- pairing:
  // a1 = (l1 - l4) / 2 >= a2 = (l2 - l3) / 2 >= 0. Continuous in k.
  std::pair<double, double> pair_at(double k) {
    const KExponents r = at(k);
    return {0.5 * (r.lam[0] - r.lam[3]), 0.5 * (r.lam[1] - r.lam[2])};
  }

 private:
  const CellGates& cg_;
  SmallEig eig_;
  bool cond_;
};

// The exact analysis of the cell's gates (bloch_exact.hpp), or nullptr with
// the reason when it could not be completed.
std::unique_ptr<BlochExact> exact_analysis(const CellGates& cg, std::string& why) {
  try {
    return std::make_unique<BlochExact>(cg.G, cg.has_site ? &cg.g : nullptr);
  } catch (const std::exception& e) {
    why = e.what();
    return nullptr;
  }
}

// Per-exponent errors above this are recomputed from certified enclosures.
constexpr double kRecomputeAbove = 1e-10;

// GSL's default error handler aborts; switch it off while we work and restore
// the caller's handler afterwards. Status codes are checked explicitly.
struct GslHandlerOff {
  gsl_error_handler_t* old;
  GslHandlerOff() : old(gsl_set_error_handler_off()) {}
  ~GslHandlerOff() { gsl_set_error_handler(old); }
};

// Wraps a C++ callable for GSL. Exceptions must not cross the C frames: they
// are stored, NaN is returned, and the caller rethrows.
struct GslCallback {
  std::function<double(double)> f;
  std::exception_ptr err;
  static double call(double x, void* p) {
    auto* self = static_cast<GslCallback*>(p);
    try {
      return self->f(x);
    } catch (...) {
      if (!self->err) self->err = std::current_exception();
      return std::numeric_limits<double>::quiet_NaN();
    }
  }
  gsl_function fn() {
    gsl_function F;
    F.function = &GslCallback::call;
    F.params = this;
    return F;
  }
  void rethrow() const {
    if (err) std::rethrow_exception(err);
  }
};

// Values within rounding of an edge are put on it, so that a branch lying on
// an edge (a flat band, say) is binned consistently instead of flickering
// between two bins and forcing spurious bisections.
double snap(const std::vector<double>& edges, double v) {
  const double tol = 64.0 * kEps * std::max(1.0, edges.back());
  const auto it = std::lower_bound(edges.begin(), edges.end(), v);
  if (it != edges.end() && *it - v <= tol) return *it;
  if (it != edges.begin() && v - *(it - 1) <= tol) return *(it - 1);
  return v;
}

int bin_of(const std::vector<double>& edges, double v) {
  const int bins = static_cast<int>(edges.size()) - 1;
  const int j =
      static_cast<int>(std::upper_bound(edges.begin(), edges.end(), v) - edges.begin()) - 1;
  return std::clamp(j, 0, bins - 1);
}

// Exponent histogram with G uniform cells on [0, pi] (k and -k agree). The
// two nonnegative branches a1 >= a2 are continuous; where a branch changes
// bin inside a cell, each edge crossing is located by bisection and the cell
// is split there. The negative exponents -a_i are the mirror image (the
// edges are exactly symmetric), so counts[j] = (h[j] + h[bins-1-j]) / (4 pi).
template <class Evaluator>
std::vector<double> histogram_on_grid(Evaluator& ev, int G, const std::vector<double>& edges) {
  const int bins = static_cast<int>(edges.size()) - 1;
  const double h = kPi / G;
  std::vector<double> a1(G + 1), a2(G + 1), ks(G + 1);
  for (int i = 0; i <= G; ++i) {
    ks[i] = i == G ? kPi : h * i;
    std::tie(a1[i], a2[i]) = ev.pair_at(ks[i]);
    a1[i] = snap(edges, a1[i]);
    a2[i] = snap(edges, a2[i]);
  }
  std::vector<double> acc(bins, 0.0);
  for (int br = 0; br < 2; ++br) {
    const std::vector<double>& a = br == 0 ? a1 : a2;
    auto val = [&](double k) {
      const auto p = ev.pair_at(k);
      return snap(edges, br == 0 ? p.first : p.second);
    };
    for (int i = 0; i < G; ++i) {
      const double ka = ks[i], kb = ks[i + 1];
      int j = bin_of(edges, a[i]);
      const int jb = bin_of(edges, a[i + 1]);
      if (j == jb) {
        acc[j] += kb - ka;
        continue;
      }
      // Walk the edges between j and jb (monotone assumption inside the cell;
      // grid refinement measures what it misses).
      double start = ka, lo = ka;
      while (j != jb) {
        const int e = jb > j ? j + 1 : j;  // edge index being crossed
        const double E = edges[e];
        const bool plo = val(lo) >= E;  // predicate on the known-before side
        double hi = kb;
        while (hi - lo > 4 * kEps * std::max(1.0, hi)) {
          const double mid = 0.5 * (lo + hi);
          if ((val(mid) >= E) == plo)
            lo = mid;
          else
            hi = mid;
        }
        const double cross = std::clamp(0.5 * (lo + hi), start, kb);
        acc[j] += cross - start;
        start = cross;
        j = jb > j ? j + 1 : j - 1;
      }
      acc[jb] += kb - start;
    }
  }
  std::vector<double> counts(bins);
  for (int j = 0; j < bins; ++j) counts[j] = (acc[j] + acc[bins - 1 - j]) / (4.0 * kPi);
  return counts;
}

}  // namespace

std::vector<std::complex<double>> bloch_matrix(const Circuit& c, double k, int& dim) {
  const CellGates cg = extract_gates(c, "bloch_matrix");
  dim = cg.dim();
  std::vector<cd> m(static_cast<std::size_t>(dim * dim));
  build_matrix(cg, std::polar(1.0, k), m.data());
  return m;
}

BlochSymbol bloch_symbol(const Circuit& c) {
  const CellGates cg = extract_gates(c, "bloch_symbol");
  BlochSymbol s;
  s.dim = cg.dim();
  s.position = cg.position;
  const std::size_t n = static_cast<std::size_t>(s.dim * s.dim);
  cd p[16], m[16], q[16];
  build_matrix(cg, cd(1.0, 0.0), p);   // A- + A0 + A+
  build_matrix(cg, cd(-1.0, 0.0), m);  // -A- + A0 - A+
  build_matrix(cg, cd(0.0, 1.0), q);   // -i A- + A0 + i A+
  for (auto& v : s.coef) v.resize(n);
  for (std::size_t j = 0; j < n; ++j) {
    const double a0 = 0.5 * (p[j].real() + m[j].real());
    const double sum = 0.5 * (p[j].real() - m[j].real());  // A+ + A-
    const double diff = q[j].imag();                         // A+ - A-
    const double vals[3] = {0.5 * (sum - diff), a0, 0.5 * (sum + diff)};
    for (int d = 0; d < 3; ++d) {
      if (!(std::fabs(vals[d]) < 9007199254740992.0))
        throw InvalidInput("bloch_symbol: a Laurent coefficient of the Bloch block exceeds 2^53");
      s.coef[d][j] = std::nearbyint(vals[d]);
    }
  }
  return s;
}

std::vector<double> bloch_exponents(const Circuit& c, double k) {
  const CellGates cg = extract_gates(c, "bloch_exponents");
  BlochEvaluator ev(cg, false);
  const KExponents r = ev.at(k);
  return std::vector<double>(r.lam, r.lam + 4);
}

namespace {

// bloch_spectrum, and (when `bands` is given) the per-momentum exponents
// behind it: the bands of the ring.
Spectrum ring_spectrum(const Circuit& c, Bands* bands) {
  if (c.boundary != Boundary::Periodic)
    throw ModelError(std::string("bloch_spectrum: boundary is ") + boundary_name(c.boundary) +
                     "; the Bloch decomposition of a finite ring needs periodic boundaries");
  if (c.L < 2 || c.L % 2 != 0)
    throw ModelError("bloch_spectrum: L = " + std::to_string(c.L) +
                     "; the two-site unit cell needs an even L >= 2");
  const CellGates cg = extract_gates(c, "bloch_spectrum");
  BlochEvaluator ev(cg, true);
  std::string why;
  const std::unique_ptr<BlochExact> exact = exact_analysis(cg, why);
  const std::int64_t N = c.L / 2;  // momenta k_m = 2 pi m / N
  // k_m and k_{N-m} = -k_m give the same exponents (real gates), so only
  // m = 0 .. N/2 are diagonalised; per[m] holds the four exponents at k_m.
  std::vector<KExponents> per(static_cast<std::size_t>(N));
  double msum = 0.0;
  std::string warning;
  RingZeros rz;
  if (exact) rz = exact->ring_zeros(N);
  // Momenta on a root-of-unity kink carry colliding (multiple) eigenvalues:
  // no isolating enclosure exists there, and dgeevx is only eps^(1/p)
  // accurate for a Jordan block of size p.
  auto on_kink = [&](std::int64_t m) { return exact && rz.per_momentum[static_cast<std::size_t>(m)] < 0; };
  auto recompute = [&](std::int64_t m, KExponents& r) {
    double v[4], rad[4];
    if (!exact || !exact->certified_exponents(m, N, v, rad)) return false;
    for (int j = 0; j < 4; ++j) {
      r.lam[j] = v[j];
      r.err4[j] = rad[j];
    }
    r.sort_desc();
    return true;
  };
  for (std::int64_t m = 0; m <= N / 2; ++m) {
    KExponents r = ev.at(2.0 * kPi * static_cast<double>(m) / static_cast<double>(N));
    // Ill-conditioned blocks (large gate entries, near-defective general
    // blocks): certified enclosures from the exact F(lambda, z) instead.
    if (!(r.err <= kRecomputeAbove) && !on_kink(m)) recompute(m, r);
    per[static_cast<std::size_t>(m)] = r;
    msum += r.msum;
    const std::int64_t mm = N - m;
    if (mm != m && mm < N) {
      per[static_cast<std::size_t>(mm)] = r;
      msum += r.msum;
    }
  }
  Spectrum s;
  s.method = Method::Bloch;
  std::int64_t zeros = 0;
  if (exact) {
    // Exact zero exponents: per momentum from its arc, per root-of-unity
    // kink orbit as a total over the orbit (bloch_exact.hpp).
    auto check = [&](std::int64_t m, int j) {
      KExponents& r = per[static_cast<std::size_t>(m)];
      // On a kink the exact count decides; the numbers there carry the
      // sqrt(eps)..eps^(1/4) scatter of a Jordan block, which is not checked.
      if (on_kink(m) || std::abs(r.lam[j]) <= r.err4[j]) return;
      KExponents q = r;  // numbers disagree with the exact count: try certified ones
      if (recompute(m, q) && std::abs(q.lam[j]) <= q.err4[j]) {
        per[static_cast<std::size_t>(m)] = q;
        return;
      }
      if (warning.empty()) {
        std::ostringstream os;
        os << "an exponent at momentum " << m << "/" << N << " that the exact analysis makes zero was computed as "
           << r.lam[j] << ", outside its error estimate " << r.err4[j];
        warning = os.str();
      }
    };
    for (std::int64_t m = 0; m < N; ++m) {
      const int z = rz.per_momentum[static_cast<std::size_t>(m)];
      if (z < 0) continue;
      for (int j = (4 - z) / 2; j < (4 + z) / 2; ++j) check(m, j);
      KExponents& r = per[static_cast<std::size_t>(m)];
      for (int j = (4 - z) / 2; j < (4 + z) / 2; ++j) r.lam[j] = r.err4[j] = 0.0;
      zeros += z;
    }
    for (const auto& [d, total] : rz.orbits) {
      // Orders 1, 2, 3, 4, 6 have at most the two momenta k and -k, whose
      // exponents coincide: they take the certified exponents of R_d directly
      // (exact zeros, rigorous radii), whatever LAPACK made of the colliding
      // eigenvalues there.
      std::vector<std::int64_t> members;
      for (std::int64_t m = 0; m < N; ++m)
        if (N / std::gcd(m, N) == d) members.push_back(m);
      if (members.size() <= 2) {
        const auto ex = exact->orbit_exponents(d);
        if (ex.size() == 4 * members.size()) {
          for (std::size_t i = 0; i < members.size(); ++i) {
            KExponents& r = per[static_cast<std::size_t>(members[i])];
            for (int j = 0; j < 4; ++j) {
              // sorted list: each value appears once per member
              const auto& [v, e] = ex[members.size() * static_cast<std::size_t>(j) + i];
              r.lam[j] = v;
              r.err4[j] = e;
            }
          }
          zeros += total;
          continue;
        }
      }
      // The `total` exponents nearest zero among all momenta of order d.
      std::vector<std::tuple<double, std::int64_t, int>> cand;
      for (std::int64_t m = 0; m < N; ++m)
        if (N / std::gcd(m, N) == d)
          for (int j = 0; j < 4; ++j) cand.emplace_back(std::abs(per[static_cast<std::size_t>(m)].lam[j]), m, j);
      std::sort(cand.begin(), cand.end());
      if (static_cast<std::int64_t>(cand.size()) < total) throw std::logic_error("bloch_spectrum: orbit count");
      for (std::int64_t i = 0; i < total; ++i) check(std::get<1>(cand[i]), std::get<2>(cand[i]));
      for (std::int64_t i = 0; i < total; ++i) {
        KExponents& r = per[static_cast<std::size_t>(std::get<1>(cand[i]))];
        r.lam[std::get<2>(cand[i])] = r.err4[std::get<2>(cand[i])] = 0.0;
      }
      zeros += total;
    }
  }
  std::vector<std::pair<double, double>> all;
  all.reserve(static_cast<std::size_t>(2 * c.L));
  for (KExponents& r : per) {
    r.sort_desc();
    for (int j = 0; j < 4; ++j) all.emplace_back(r.lam[j], r.err4[j]);
  }
  if (bands) {
    bands->exact = exact != nullptr;
    bands->note = exact ? warning : why;
    for (std::int64_t m = 0; m < N; ++m) {
      const KExponents& r = per[static_cast<std::size_t>(m)];
      bands->k.push_back(2.0 * kPi * static_cast<double>(m) / static_cast<double>(N));
      for (int j = 0; j < 4; ++j) {
        bands->exponents.push_back(r.lam[j]);
        bands->errors.push_back(r.err4[j]);
      }
      // Exact: zeros are exactly 0.0, and a momentum on a root-of-unity kink
      // carries colliding eigenvalues. Numerical: the error decides.
      const bool all_zero = exact ? r.lam[0] == 0.0 : std::abs(r.lam[0]) <= r.err4[0];
      const bool kink = exact && rz.per_momentum[static_cast<std::size_t>(m)] < 0;
      bands->classes.push_back(static_cast<int>(!all_zero ? BlockClass::Hyperbolic
                                                : kink    ? BlockClass::Parabolic
                                                          : BlockClass::Elliptic));
    }
  }
  std::sort(all.begin(), all.end(), [](const auto& x, const auto& y) { return x.first > y.first; });
  for (const auto& [l, e] : all) {
    s.exponents.push_back(l);
    s.errors.push_back(e);
    s.error_bound = std::max(s.error_bound, e);
  }
  measure_pairing(s);
  // Position class: the +- pairing of S holds by construction, so the
  // informative sum is over what was diagonalised, sum ln|mu(M(z))| = 0
  // (|det M(z)| = det(A)^2 = 1). In the 4x4 case that is the whole spectrum.
  if (cg.position) s.sum_defect = std::abs(msum);
  if (exact) {
    s.zero_rule = ZeroRule::Exact;
    s.zero_count = zeros;
    s.warning = warning;
  } else {
    s.zero_rule = ZeroRule::Numerical;  // the analysis failed (`why`); flagged, not an error
  }
  return s;
}

}  // namespace

Spectrum bloch_spectrum(const Circuit& c) { return ring_spectrum(c, nullptr); }

Spectrum twin_ring_spectrum(const GateSource& g) {
  GateSource ring = g;
  ring.boundary = Boundary::Periodic;
  ring.L = g.L + (g.L % 2);
  return bloch_spectrum(materialize(ring));
}

Bands ring_bands(const Circuit& c) {
  Bands b;
  (void)ring_spectrum(c, &b);
  return b;
}

Bands bulk_bands(const Circuit& c, const std::vector<double>& ks) {
  const CellGates cg = extract_gates(c, "bulk_bands");
  BlochEvaluator ev(cg, true);
  std::string why;
  const std::unique_ptr<BlochExact> exact = exact_analysis(cg, why);
  GslHandlerOff guard;
  Bands b;
  b.exact = exact != nullptr;
  b.note = why;
  std::vector<std::pair<double, double>> at_end[2];  // certified exponents at k = 0 and pi
  for (double k : ks) {
    if (!(k >= 0.0 && k <= kPi)) throw InvalidInput("bulk_bands: momentum outside [0, pi]");
    KExponents r = ev.at(k);
    bool kink = false;
    if (exact) {
      double v[4], rad[4];
      bool cert = false;
      if (k == 0.0 || k == kPi) {
        // Real blocks whose eigenvalues may collide: the certified exponents of
        // the integer polynomials det(x - M(+-1)), exact zeros included.
        auto& e = at_end[k == 0.0 ? 0 : 1];
        if (e.empty()) e = exact->orbit_exponents(k == 0.0 ? 1 : 2);
        if (e.size() == 4) {
          for (int j = 0; j < 4; ++j) std::tie(v[j], rad[j]) = e[static_cast<std::size_t>(j)];
          cert = true;
        }
        const auto& ord = exact->kink_orders();
        kink = std::find(ord.begin(), ord.end(), k == 0.0 ? 1 : 2) != ord.end();
      } else {
        for (double q : exact->kinks()) kink = kink || std::abs(k - q) <= 1e-12;
        if (!(r.err <= kRecomputeAbove)) cert = exact->certified_exponents_at(k, v, rad);
      }
      if (cert) {
        for (int j = 0; j < 4; ++j) {
          r.lam[j] = v[j];
          r.err4[j] = rad[j];
        }
        r.sort_desc();
      }
      if (!(k == 0.0 || k == kPi)) {
        // Between kinks the number of unit-circle eigenvalues is exact: those
        // exponents are exactly zero (at a kink, the count of the arc on its
        // left, bloch_exact.hpp).
        const int on = exact->on_circle_near(k);
        for (int j = (4 - on) / 2; j < (4 + on) / 2; ++j) r.lam[j] = r.err4[j] = 0.0;
        if (kink) r.lam[1] = r.lam[2] = r.err4[1] = r.err4[2] = 0.0;  // a pair collides on the circle
      }
    }
    b.k.push_back(k);
    for (int j = 0; j < 4; ++j) {
      b.exponents.push_back(r.lam[j]);
      b.errors.push_back(r.err4[j]);
    }
    const bool all_zero = exact ? r.lam[0] == 0.0 : std::abs(r.lam[0]) <= r.err4[0];
    b.classes.push_back(static_cast<int>(!all_zero ? BlockClass::Hyperbolic
                                         : kink    ? BlockClass::Parabolic
                                                   : BlockClass::Elliptic));
  }
  return b;
}

BandArcs band_arcs(const Circuit& c) {
  const CellGates cg = extract_gates(c, "band_arcs");
  std::string why;
  const std::unique_ptr<BlochExact> exact = exact_analysis(cg, why);
  if (!exact) throw SolverError("band_arcs: the exact analysis failed: " + why);
  BandArcs a;
  for (const BlochArc& arc : exact->arcs()) {
    a.lo.push_back(arc.k_lo);
    a.hi.push_back(arc.k_hi);
    a.on_circle.push_back(arc.on_circle);
    a.classes.push_back(static_cast<int>(arc.on_circle >= 4 ? BlockClass::Elliptic : BlockClass::Hyperbolic));
  }
  const auto& ord = exact->kink_orders();
  if (std::find(ord.begin(), ord.end(), 1) != ord.end()) a.kinks.push_back(0.0);
  for (double q : exact->kinks()) a.kinks.push_back(q);
  if (std::find(ord.begin(), ord.end(), 2) != ord.end()) a.kinks.push_back(kPi);
  return a;
}

// Bulk limit. Per-site quantities of a translation-invariant circuit for
// L -> infinity depend only on the gates: the boundary changes O(1) of the 2L
// exponents (an O(1/L) effect per site), so any boundary and any L >= 2 are
// accepted; the circuit only supplies its bond and site gates.
BulkLimit bulk_limit(const Circuit& c, int bins, double tol) {
  if (bins < 1)
    throw InvalidInput("bulk_limit: bins = " + std::to_string(bins) + ", needs >= 1");
  if (!(tol > 0.0)) throw InvalidInput("bulk_limit: tol must be positive");
  const CellGates cg = extract_gates(c, "bulk_limit");
  BlochEvaluator ev_raw(cg, false);
  BlochEvaluator ev_cond(cg, true);
  std::string why;
  const std::unique_ptr<BlochExact> exact = exact_analysis(cg, why);
  GslHandlerOff guard;
  BulkLimit out;
  // The two nonnegative exponents at k with the exact zeros imposed: on an
  // arc where 2 (4) of the block's eigenvalues lie on the unit circle, a2
  // (a1 and a2) vanish identically.
  // Blocks whose double-precision values are poor (huge gate entries: the
  // small eigenvalues lose their digits, which breaks the exact +- pairing)
  // are evaluated from certified enclosures instead, here as in the ring.
  struct Pairs {
    BlochEvaluator& raw;   // values only (fast)
    BlochEvaluator& cond;  // with condition numbers, for error estimates
    const BlochExact* exact;
    // k = 0 and k = pi: real blocks whose eigenvalues may collide, where no
    // enclosure isolates them; the certified exponents of R_1 and R_2 (the
    // integer polynomials det(x - M(+-1))) instead.
    std::vector<std::pair<double, double>> at_end[2];
    bool certified(double k, double v[4], double rad[4]) {
      if (!exact) return false;
      if (k == 0.0 || k == kPi) {
        auto& e = at_end[k == 0.0 ? 0 : 1];
        if (e.empty()) e = exact->orbit_exponents(k == 0.0 ? 1 : 2);
        if (e.size() != 4) return false;
        for (int j = 0; j < 4; ++j) std::tie(v[j], rad[j]) = e[static_cast<std::size_t>(j)];
        return true;
      }
      return exact->certified_exponents_at(k, v, rad);
    }
    std::pair<double, double> pair_at(double k) {
      const int on = exact ? exact->on_circle_near(k) : 0;
      if (on >= 4) return {0.0, 0.0};
      const KExponents r = raw.at(k);
      std::pair<double, double> p{0.5 * (r.lam[0] - r.lam[3]), 0.5 * (r.lam[1] - r.lam[2])};
      const double defect = std::max(std::abs(r.lam[0] + r.lam[3]), std::abs(r.lam[1] + r.lam[2]));
      double v[4], rad[4];
      if (!(defect <= kRecomputeAbove) && certified(k, v, rad)) p = {0.5 * (v[0] - v[3]), 0.5 * (v[1] - v[2])};
      if (on >= 2) p.second = 0.0;
      return p;
    }
    double err_at(double k) {
      const int on = exact ? exact->on_circle_near(k) : 0;
      const KExponents r = cond.at(k);
      double e = on >= 2 ? std::max(r.err4[0], r.err4[3]) : r.err;
      double v[4], rad[4];
      if (!(e <= kRecomputeAbove) && certified(k, v, rad))
        e = on >= 2 ? std::max(rad[0], rad[3]) : std::max({rad[0], rad[1], rad[2], rad[3]});
      return e;
    }
  } ev{ev_raw, ev_cond, exact.get()};
  // Arcs of [0, pi] to integrate over, split at every kink: between kinks
  // the integrand is analytic; at a kink two eigenvalues leave the circle and
  // the exponents grow like sqrt(|k - k0|), which the adaptive rule handles at
  // an end point but not inside an interval. Arcs with every eigenvalue on
  // the circle contribute exactly 0.
  std::vector<std::pair<double, double>> pieces;
  if (exact) {
    for (const BlochArc& a : exact->arcs())
      if (a.on_circle < 4 && a.k_hi > a.k_lo) pieces.emplace_back(a.k_lo, a.k_hi);
  } else {
    pieces.emplace_back(0.0, kPi);
  }
  out.zero_certified = exact != nullptr;

  // ---- lambda_max = sup_k a1(k), a1 the largest exponent at k after the
  // exact +- pairing is imposed. Grid scan on [0, pi] (a1 is even and 2 pi periodic, so
  // 0 and pi are interior points of the mirrored function), then Brent.
  const int Nscan = 4096;
  const double hs = kPi / Nscan;
  std::vector<double> top(Nscan + 1);
  for (int i = 0; i <= Nscan; ++i) top[i] = ev.pair_at(i == Nscan ? kPi : hs * i).first;
  auto top_at = [&](int i) { return top[i < 0 ? -i : (i > Nscan ? 2 * Nscan - i : i)]; };
  std::vector<int> cand;
  for (int i = 0; i <= Nscan; ++i)
    if (top_at(i) >= top_at(i - 1) && top_at(i) >= top_at(i + 1)) cand.push_back(i);
  std::sort(cand.begin(), cand.end(), [&](int x, int y) { return top[x] > top[y]; });
  if (cand.size() > 8) cand.resize(8);

  double lmax = *std::max_element(top.begin(), top.end());
  double kbest = hs * static_cast<double>(std::max_element(top.begin(), top.end()) - top.begin());
  double ref_err = 0.0;
  if (lmax > 0.0) {
    GslCallback cb{[&](double k) { return -ev.pair_at(k).first; }, nullptr};
    gsl_function F = cb.fn();
    std::unique_ptr<gsl_min_fminimizer, decltype(&gsl_min_fminimizer_free)> mz(
        gsl_min_fminimizer_alloc(gsl_min_fminimizer_brent), &gsl_min_fminimizer_free);
    if (!mz) throw SolverError("bulk_limit: gsl_min_fminimizer_alloc failed");
    double best_err = 0.0;
    for (int i : cand) {
      const double km = hs * i, kl = km - hs, ku = km + hs;
      const double fm = -top_at(i), fl = -top_at(i - 1), fu = -top_at(i + 1);
      if (!(fm < fl && fm < fu)) continue;  // flat to rounding: no bracket to refine
      if (gsl_min_fminimizer_set_with_values(mz.get(), &F, km, fm, kl, fl, ku, fu) != GSL_SUCCESS)
        continue;
      for (int it = 0; it < 200; ++it) {
        if (gsl_min_fminimizer_iterate(mz.get()) != GSL_SUCCESS) break;
        if (gsl_min_test_interval(gsl_min_fminimizer_x_lower(mz.get()),
                                  gsl_min_fminimizer_x_upper(mz.get()), 1e-11, 0.0) == GSL_SUCCESS)
          break;
      }
      cb.rethrow();
      const double v = -gsl_min_fminimizer_f_minimum(mz.get());
      // The maximum lies in the final bracket; the spread of a1 over it
      // estimates how much the refinement can still be off.
      const double spread = std::max(v + gsl_min_fminimizer_f_lower(mz.get()),
                                     v + gsl_min_fminimizer_f_upper(mz.get()));
      if (v > lmax) {
        lmax = v;
        kbest = gsl_min_fminimizer_x_minimum(mz.get());
        best_err = spread;
      }
    }
    // Add the eigen-solver error estimate at the maximiser.
    ref_err = std::max(best_err, ev.err_at(kbest));
  }
  out.lambda_max = lmax;

  // ---- ks_density = (1/2pi) int_0^{2pi} (1/2)(a1 + a2) dk = (1/pi) int_0^pi ...
  // summed over the pieces; the accuracy adds the quadrature's error
  // estimates and the mean eigen-solver error of the integrand over the scan
  // grid (a pointwise error e of the integrand moves the integral by at most e).
  {
    GslCallback cb{[&](double k) {
                     const auto p = ev.pair_at(k);
                     return 0.5 * (p.first + p.second);
                   },
                   nullptr};
    gsl_function F = cb.fn();
    const std::size_t limit = 2000;
    std::unique_ptr<gsl_integration_workspace, decltype(&gsl_integration_workspace_free)> ws(
        gsl_integration_workspace_alloc(limit), &gsl_integration_workspace_free);
    if (!ws) throw SolverError("bulk_limit: gsl_integration_workspace_alloc failed");
    double total = 0.0, total_err = 0.0;
    for (const auto& [ka, kb] : pieces) {
      double result = 0.0, abserr = 0.0;
      const int status =
          gsl_integration_qags(&F, ka, kb, tol * (kb - ka), 0.0, limit, ws.get(), &result, &abserr);
      cb.rethrow();
      if (!std::isfinite(result))
        throw SolverError(std::string("bulk_limit: KS integral failed: ") + gsl_strerror(status));
      // On GSL_EROUND / GSL_EMAXITER etc. the best estimate is kept and its
      // error estimate reported through `accuracy`.
      total += result;
      total_err += abserr;
    }
    // Mean of the pointwise error over the scan grid (every 8th point): the
    // integral of the integrand's error, which spikes only near double roots
    // (sqrt(eps) in a neighbourhood of width ~sqrt(eps)).
    double pointwise = 0.0;
    int samples = 0;
    // (Cell midpoints: never exactly k = 0 or pi, where eigenvalues of real
    // blocks may collide and no enclosure isolates them.)
    for (int i = 0; i < Nscan; i += 8, ++samples) {
      const double k = hs * (i + 0.5);
      if (exact && exact->on_circle_near(k) >= 4) continue;
      pointwise += ev.err_at(k);
    }
    pointwise /= std::max(1, samples);
    out.ks_density = total / kPi;
    out.accuracy = std::max(total_err / kPi + pointwise, ref_err);
  }

  // ---- histogram on [-lambda_max, lambda_max], or [-1, 1] when lambda_max is
  // zero within its own error estimate (elliptic circuits).
  const double span = (lmax <= std::max(1e-9, 10.0 * ref_err)) ? 1.0 : lmax;
  out.hist_edges.resize(static_cast<std::size_t>(bins) + 1);
  for (int j = 0; j <= bins; ++j)
    // (2j - bins)/bins is exact-sign-symmetric, so edges[bins-j] == -edges[j].
    out.hist_edges[j] = span * (static_cast<double>(2 * j - bins) / bins);
  out.hist_edges[0] = -span;
  out.hist_edges[bins] = span;
  // Grids of G and 2G cells on [0, pi]; G doubles (up to 65536 cells) until
  // the two agree to `tol` in every bin. The finer one is returned, and the
  // last difference is hist_accuracy.
  int G = 1024;
  std::vector<double> coarse = histogram_on_grid(ev, G, out.hist_edges);
  std::vector<double> fine;
  double diff = 0.0;
  for (;;) {
    fine = histogram_on_grid(ev, 2 * G, out.hist_edges);
    diff = 0.0;
    for (int j = 0; j < bins; ++j) diff = std::max(diff, std::abs(fine[j] - coarse[j]));
    if (diff <= tol || 2 * G >= 65536) break;
    G *= 2;
    coarse.swap(fine);
  }
  out.hist_counts = std::move(fine);
  out.hist_accuracy = diff;
  return out;
}

}  // namespace toral

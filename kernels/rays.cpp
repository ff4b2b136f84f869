// Velocity-dependent Lyapunov exponents from the Bloch symbol at complex
// momentum (rays.hpp has the formulas and sources).
#include "rays.hpp"

#include <complex>
#define lapack_complex_float std::complex<float>
#define lapack_complex_double std::complex<double>
#include <lapacke.h>

#include <algorithm>
#include <array>
#include <cmath>
#include <complex>
#include <functional>
#include <limits>
#include <numbers>
#include <string>

#include <gsl/gsl_errno.h>
#include <gsl/gsl_min.h>

#include "bloch.hpp"
#include "errors.hpp"

namespace toral {
namespace {

using cd = std::complex<double>;
constexpr double kEps = std::numeric_limits<double>::epsilon();
constexpr double kPi = std::numbers::pi;
constexpr double kInf = std::numeric_limits<double>::infinity();
constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
constexpr double kMuLimit = 200.0;  // |mu| beyond which a minimiser counts as the cone's edge
constexpr int kGridK = 33;          // k grid on [0, pi] before the local refinement

// GSL's default handler aborts; the minimiser's status is checked instead.
struct GslQuiet {
  gsl_error_handler_t* old;
  GslQuiet() : old(gsl_set_error_handler_off()) {}
  ~GslQuiet() { gsl_set_error_handler(old); }
  GslQuiet(const GslQuiet&) = delete;
  GslQuiet& operator=(const GslQuiet&) = delete;
};

struct Rate {
  double value = 0, err = 0, k = 0;
};

// Characteristic polynomial det(x - M) = x^n + a_1 x^(n-1) + ... + a_n of a
// small complex matrix (Faddeev-LeVerrier).
std::array<cd, 5> charpoly(const cd* m, int n) {
  std::array<cd, 5> a{};
  a[0] = 1.0;
  cd Mk[16] = {}, T[16];
  for (int k = 1; k <= n; ++k) {
    // Mk = M * M_{k-1} + a_{k-1} I  (M_0 = 0)
    for (int i = 0; i < n; ++i)
      for (int j = 0; j < n; ++j) {
        cd s = 0;
        for (int l = 0; l < n; ++l) s += m[i * n + l] * Mk[l * n + j];
        T[i * n + j] = s + (i == j ? a[static_cast<std::size_t>(k - 1)] : cd(0));
      }
    std::copy(T, T + n * n, Mk);
    cd tr = 0;
    for (int i = 0; i < n; ++i)
      for (int l = 0; l < n; ++l) tr += m[i * n + l] * Mk[l * n + i];
    a[static_cast<std::size_t>(k)] = -tr / static_cast<double>(k);
  }
  return a;
}

// ln rho(M(e^(s mu + i k))) and its rounding error, s = +-1.
class Evaluator {
 public:
  Evaluator(const BlochSymbol& sym, double sign) : s_(sym), sign_(sign), n_(sym.dim) {}

  void matrix(cd z, cd* m) const {
    const cd zi = 1.0 / z;
    for (int j = 0; j < n_ * n_; ++j) m[j] = s_.coef[0][j] * zi + s_.coef[1][j] + s_.coef[2][j] * z;
  }

  double log_rho(double mu, double k, double* err) {
    const cd z = std::polar(std::exp(sign_ * mu), k);
    cd m[16];
    matrix(z, m);
    double norm = 0;
    for (int j = 0; j < n_ * n_; ++j) norm += std::norm(m[j]);
    norm = std::sqrt(norm);
    if (n_ == 2) {
      const cd t = 0.5 * (m[0] + m[3]);
      const cd d = m[0] * m[3] - m[1] * m[2];
      const cd sq = std::sqrt(t * t - d);
      const cd r1 = t + sq, r2 = t - sq;
      const double rho = std::max(std::abs(r1), std::abs(r2));
      // first-order rounding of a simple root, (dp)^(1/2) for a (near-)double one
      const double dp = 8 * kEps * (norm * norm + norm * rho + rho * rho);
      const double sep = std::abs(r1 - r2);
      const double e = sep > 1e-3 * rho ? dp / (sep * rho) : std::sqrt(dp) / rho;
      if (err) *err = std::min(e, 1.0);
      return std::log(rho);
    }
    return top_root(m, norm, err);
  }

  // Lambda(mu) = max over k of ln rho (symmetric in k -> -k: real coefficients).
  Rate weighted(double mu) {
    std::array<double, kGridK> f{}, e{};
    for (int j = 0; j < kGridK; ++j) f[j] = log_rho(mu, kPi * j / (kGridK - 1), &e[j]);
    Rate best;
    best.value = -kInf;
    for (int j = 0; j < kGridK; ++j) {
      const bool left = j == 0 || f[j] >= f[j - 1];
      const bool right = j + 1 == kGridK || f[j] >= f[j + 1];
      if (!(left && right)) continue;
      Rate r = refine(mu, j, f[j]);
      if (r.value > best.value || (r.value == best.value && r.err < best.err)) best = r;
    }
    return best;
  }

  // dLambda/dmu at the maximiser (a subgradient of the convex Lambda).
  double slope(double mu, double k, double* err) {
    const double h = 1e-5;
    double e1 = 0, e2 = 0;
    const double d = (log_rho(mu + h, k, &e1) - log_rho(mu - h, k, &e2)) / (2 * h);
    if (err) *err = (e1 + e2) / (2 * h) + 1e-9;
    return d;
  }

 private:
  // Brent's minimiser (GSL) on -ln rho in k around grid point j: parabolic
  // steps with golden-section safeguard, to 1e-10 rad.
  Rate refine(double mu, int j, double fj) {
    const double step = kPi / (kGridK - 1);
    const double kj = j * step;
    double ej = 0;
    (void)log_rho(mu, kj, &ej);
    Rate best{fj, ej, kj};
    const double a = std::max(0.0, (j - 1) * step), b = std::min(kPi, (j + 1) * step);
    if (j == 0 || j + 1 == kGridK) {  // a maximum at an end of [0, pi]: check just inside
      const double kin = j == 0 ? 1e-7 : kPi - 1e-7;
      double e = 0;
      if (log_rho(mu, kin, &e) <= fj) return best;
    }
    struct P {
      Evaluator* ev;
      double mu;
    } par{this, mu};
    gsl_function F;
    F.function = [](double k, void* p) {
      auto* q = static_cast<P*>(p);
      return -q->ev->log_rho(q->mu, k, nullptr);
    };
    F.params = &par;
    const double lo = j == 0 ? -step : a, hi = j + 1 == kGridK ? kPi + step : b;  // symmetric in k: extend
    const double fl = -log_rho(mu, lo, nullptr), fh = -log_rho(mu, hi, nullptr);
    if (!(-fj < fl && -fj < fh)) return best;  // flat: keep the grid value
    gsl_min_fminimizer* m = gsl_min_fminimizer_alloc(gsl_min_fminimizer_brent);
    gsl_min_fminimizer_set_with_values(m, &F, kj, -fj, lo, fl, hi, fh);
    for (int it = 0; it < 100; ++it) {
      if (gsl_min_fminimizer_iterate(m) != GSL_SUCCESS) break;
      if (gsl_min_test_interval(gsl_min_fminimizer_x_lower(m), gsl_min_fminimizer_x_upper(m), 1e-10, 0) ==
          GSL_SUCCESS)
        break;
    }
    const double kx = gsl_min_fminimizer_x_minimum(m);
    gsl_min_fminimizer_free(m);
    double ex = 0;
    const double fx = log_rho(mu, kx, &ex);
    if (fx > best.value) best = {fx, ex, std::fabs(kx) > kPi ? 2 * kPi - std::fabs(kx) : std::fabs(kx)};
    return best;
  }

  // ln of the largest root modulus of the characteristic polynomial of the
  // 4x4 m (Faddeev-LeVerrier, then Aberth-Ehrlich iteration: about ten times
  // faster than a general eigensolver on a 4x4), with the first-order
  // rounding estimate |dp| / (|p'(mu)| |mu|) (sqrt(|dp| / |p''|) at a
  // near-double root).
  double top_root(const cd* m, double norm, double* err);

  cd warm_[4];           // the last call's roots: the next call's starting points
  bool warm_ok_ = false;
  const BlochSymbol& s_;
  double sign_;
  int n_;
};

double Evaluator::top_root(const cd* m, double norm, double* err) {
  const std::array<cd, 5> a = charpoly(m, 4);
  auto poly = [&](cd x, cd* d1, cd* d2) {
    cd p = a[0], q = 0, r = 0;
    for (int j = 1; j <= 4; ++j) {
      r = r * x + q;
      q = q * x + p;
      p = p * x + a[static_cast<std::size_t>(j)];
    }
    if (d1) *d1 = q;
    if (d2) *d2 = 2.0 * r;
    return p;
  };
  double bound = 0;  // Fujiwara bound on the root moduli
  for (int j = 1; j <= 4; ++j) bound = std::max(bound, std::pow(std::abs(a[static_cast<std::size_t>(j)]), 1.0 / j));
  bound = 2 * std::max(bound, 1e-300);
  cd* x = warm_;
  if (!warm_ok_)
    for (int j = 0; j < 4; ++j) x[j] = std::polar(0.5 * bound, 0.4 + kPi * j / 2);
  for (int it = 0; it < 200; ++it) {
    double moved = 0;
    for (int j = 0; j < 4; ++j) {
      cd d1;
      const cd p = poly(x[j], &d1, nullptr);
      if (p == 0.0) continue;
      const cd ratio = p / d1;
      cd sum = 0;
      for (int l = 0; l < 4; ++l)
        if (l != j) sum += 1.0 / (x[j] - x[l]);
      const cd w = ratio / (1.0 - ratio * sum);
      x[j] -= w;
      moved = std::max(moved, std::abs(w) / std::max(std::abs(x[j]), 1e-300));
    }
    if (moved < 4e-14) break;
  }
  int top = 0;
  for (int j = 1; j < 4; ++j)
    if (std::abs(x[j]) > std::abs(x[top])) top = j;
  cd d1;
  for (int it = 0; it < 3; ++it) {  // Newton polish of the top root
    const cd p = poly(x[top], &d1, nullptr);
    if (d1 == 0.0) break;
    x[top] -= p / d1;
  }
  const double rho = std::abs(x[top]);
  warm_ok_ = std::isfinite(rho);
  for (int j = 0; j < 4 && warm_ok_; ++j)  // distinct, finite starts for the next call
    for (int l = 0; l < j; ++l)
      if (!(std::abs(x[j] - x[l]) > 1e-8 * rho)) warm_ok_ = false;
  double dp = 0;  // rounding of the coefficients (Faddeev-LeVerrier: ~ n eps ||M||^j each)
  for (int j = 0; j <= 4; ++j) dp += std::pow(norm, j) * std::pow(rho, 4 - j);
  dp *= 64 * kEps;
  // A cluster of m roots at the top moves by (dp / prod_{others} |x_top - x_l|)^(1/m)
  // (m = 1: the first-order estimate; m = 4: eps^(1/4) at a fourfold root).
  int mult = 0;
  double prod = 1;
  for (int l = 0; l < 4; ++l) {
    const double dl = std::abs(x[l] - x[top]);
    if (dl < 1e-3 * rho)
      ++mult;
    else
      prod *= dl;
  }
  const double e = std::pow(dp / prod, 1.0 / mult) / rho;
  if (err) *err = std::min(e, 1.0);
  return std::log(rho);
}

// Largest root modulus of the polynomial sum_i p[i] x^(deg - i) (p[0] != 0).
double largest_root(const std::vector<double>& p) {
  const int d = static_cast<int>(p.size()) - 1;
  if (d <= 0) return 0.0;
  std::vector<cd> comp(static_cast<std::size_t>(d * d), 0.0), w(static_cast<std::size_t>(d));
  for (int j = 0; j < d; ++j) comp[static_cast<std::size_t>(j * d)] = -p[static_cast<std::size_t>(j + 1)] / p[0];
  for (int i = 1; i < d; ++i) comp[static_cast<std::size_t>((i - 1) * d + i)] = 1.0;  // column-major subdiagonal
  const lapack_int info =
      LAPACKE_zgeev(LAPACK_COL_MAJOR, 'N', 'N', d, comp.data(), d, w.data(), nullptr, 1, nullptr, 1);
  if (info != 0) throw SolverError("zgeev failed on the light-cone polynomial, info = " + std::to_string(info));
  double r = 0;
  for (const cd& x : w) r = std::max(r, std::abs(x));
  return r;
}

// The light cone from the Newton polygon of det(x - M(z)): the slopes s_+
// (z -> inf) and s_- (z -> 0) of Lambda(mu) and the edge values ln|C|.
struct Cone {
  double s_plus = 0, s_minus = 0, edge_plus = 0, edge_minus = 0;
};

Cone exact_cone(const BlochSymbol& sym) {
  const int n = sym.dim, P = 16;
  // Laurent coefficients of a_j(z), degrees -n..n, from P samples on |z| = 1.
  std::vector<std::array<double, 9>> coef(static_cast<std::size_t>(n + 1));
  std::vector<std::array<cd, 5>> samples(P);
  Evaluator ev(sym, 1.0);
  for (int m = 0; m < P; ++m) {
    cd mat[16];
    ev.matrix(std::polar(1.0, 2 * kPi * m / P), mat);
    samples[static_cast<std::size_t>(m)] = charpoly(mat, n);
  }
  for (int j = 0; j <= n; ++j)
    for (int d = -4; d <= 4; ++d) {
      cd s = 0;
      for (int m = 0; m < P; ++m)
        s += samples[static_cast<std::size_t>(m)][static_cast<std::size_t>(j)] * std::polar(1.0, -2 * kPi * m * d / P);
      s /= static_cast<double>(P);
      const double r = std::nearbyint(s.real());
      if (std::fabs(r) > 1099511627776.0)
        throw SolverError("the Bloch block's characteristic polynomial has coefficients beyond 2^40; the exact "
                          "light cone needs smaller gate entries");
      if (std::abs(s - r) > 0.25)
        throw SolverError("the characteristic polynomial of the Bloch block is not an integer Laurent polynomial "
                          "to rounding (entries too large)");
      coef[static_cast<std::size_t>(j)][static_cast<std::size_t>(d + 4)] = r;
    }
  auto side = [&](bool top, double& slope, double& edge) {
    // degree (top: highest, else minus lowest) of each a_j, j >= 1
    std::vector<int> deg(static_cast<std::size_t>(n + 1), std::numeric_limits<int>::min());
    deg[0] = 0;
    for (int j = 1; j <= n; ++j)
      for (int d = -4; d <= 4; ++d)
        if (coef[static_cast<std::size_t>(j)][static_cast<std::size_t>(d + 4)] != 0) {
          const int dd = top ? d : -d;
          deg[static_cast<std::size_t>(j)] = std::max(deg[static_cast<std::size_t>(j)], dd);
        }
    slope = 0;
    int jmax = 0;
    for (int j = 1; j <= n; ++j) {
      if (deg[static_cast<std::size_t>(j)] == std::numeric_limits<int>::min()) continue;
      const double r = static_cast<double>(deg[static_cast<std::size_t>(j)]) / j;
      if (r > slope + 1e-12) slope = r, jmax = j;
      else if (std::fabs(r - slope) <= 1e-12) jmax = j;
    }
    // Q(C) = sum over j on the segment of (leading coef of a_j) C^(jmax - j)
    std::vector<double> q(static_cast<std::size_t>(jmax + 1), 0.0);
    for (int j = 0; j <= jmax; ++j) {
      const int dj = deg[static_cast<std::size_t>(j)];
      if (dj == std::numeric_limits<int>::min()) continue;
      if (std::fabs(static_cast<double>(dj) - slope * j) > 1e-9) continue;
      const int d = top ? dj : -dj;
      q[static_cast<std::size_t>(j)] = j == 0 ? 1.0 : coef[static_cast<std::size_t>(j)][static_cast<std::size_t>(d + 4)];
    }
    edge = std::log(largest_root(q));
    if (std::fabs(edge) < 1e-12) edge = 0.0;  // |C| = 1 to rounding (integer coefficients, degree <= 4)
  };
  Cone c;
  side(true, c.s_plus, c.edge_plus);
  side(false, c.s_minus, c.edge_minus);
  return c;
}

// min over mu of f(mu) = Lambda(mu) + mu u for u strictly inside the cone.
// `hint`: a guess of the minimiser (the previous velocity's), updated on return.
Rate legendre(Evaluator& ev, double u, double edge_value_lo, double edge_value_hi, double& hint) {
  auto fprime = [&](double mu, Rate* r, double* derr) {
    *r = ev.weighted(mu);
    return ev.slope(mu, r->k, derr) + u;
  };
  Rate ra, rb;
  double ea = 0, eb = 0;
  double a = hint - 0.25, b = hint + 0.25, w = 0.5;
  double fa = fprime(a, &ra, &ea), fb = fprime(b, &rb, &eb);
  while (fa > 0) {  // the minimiser is left of a
    b = a, fb = fa, rb = ra, eb = ea;
    a -= w, w *= 2;
    if (a < -kMuLimit) return {edge_value_lo, std::fabs(ra.value + b * u - edge_value_lo) + ra.err, 0};
    fa = fprime(a, &ra, &ea);
  }
  while (fb < 0) {
    a = b, fa = fb, ra = rb, ea = eb;
    b += w, w *= 2;
    if (b > kMuLimit) return {edge_value_hi, std::fabs(rb.value + a * u - edge_value_hi) + rb.err, 0};
    fb = fprime(b, &rb, &eb);
  }
  // bracketed: f'(a) <= 0 <= f'(b); Brent's root finder on the monotone f'
  // (inverse quadratic interpolation with bisection safeguard), keeping the
  // bracket's ends and their values.
  double wa = fa, wb = fb;  // secant weights (Illinois: the retained end's value is halved)
  int side = 0;
  auto gap = [&]() {
    const double Fa = ra.value + a * u, Fb = rb.value + b * u;
    if (!(fb - fa > 0)) return 0.0;
    const double x = (Fb - Fa + fa * a - fb * b) / (fa - fb);
    return std::min(Fa, Fb) - (Fa + fa * (x - a));
  };
  while (b - a > 1e-10 * std::max(1.0, std::fabs(a) + std::fabs(b)) && gap() > 1e-13) {
    double x = 0.5 * (a + b);
    if (wb != wa) {
      const double sec = a - wa * (b - a) / (wb - wa);
      if (sec > a + 1e-3 * (b - a) && sec < b - 1e-3 * (b - a)) x = sec;
    }
    Rate rx;
    double ex = 0;
    const double fx = fprime(x, &rx, &ex);
    if (fx <= 0) {
      a = x, fa = wa = fx, ra = rx, ea = ex;
      if (side == -1) wb *= 0.5;
      side = -1;
    } else {
      b = x, fb = wb = fx, rb = rx, eb = ex;
      if (side == 1) wa *= 0.5;
      side = 1;
    }
  }
  // f at both ends, and the lower bound from the tangent lines (convexity)
  const double Fa = ra.value + a * u, Fb = rb.value + b * u;
  double lower = std::min(Fa, Fb);
  if (fb - fa > 0) {
    const double x = (Fb - Fa + fa * a - fb * b) / (fa - fb);  // where the tangents cross
    lower = Fa + fa * (x - a);
  }
  const double up = std::min(Fa, Fb);
  hint = Fa <= Fb ? a : b;
  Rate out;
  out.value = up;
  out.err = (up - lower) + std::max(ra.err, rb.err) + (ea + eb) * (b - a);
  return out;
}

}  // namespace

double weighted_rate(const Circuit& c, bool momentum, double mu, double* err) {
  const BlochSymbol sym = bloch_symbol(c);
  const GslQuiet quiet;
  Evaluator ev(sym, sym.position && momentum ? -1.0 : 1.0);
  const Rate r = ev.weighted(mu);
  if (err) *err = r.err;
  return r.value;
}

VelocityExponents velocity_exponents(const Circuit& c, bool momentum, const std::vector<double>& v) {
  const BlochSymbol sym = bloch_symbol(c);
  const GslQuiet quiet;
  const bool mirror = sym.position && momentum;
  Evaluator ev(sym, mirror ? -1.0 : 1.0);
  Cone cone = exact_cone(sym);
  if (mirror) std::swap(cone.s_plus, cone.s_minus), std::swap(cone.edge_plus, cone.edge_minus);
  VelocityExponents out;
  out.position = sym.position;
  out.v = v;
  // cells: u in [-s_plus, s_minus]; lambda(-s_plus) = edge_plus, lambda(s_minus) = edge_minus
  const double ulo = -cone.s_plus, uhi = cone.s_minus;
  out.cone_left = 2 * ulo + 0.0;  // + 0.0: no -0
  out.cone_right = 2 * uhi;
  out.edge_left = cone.edge_plus;
  out.edge_right = cone.edge_minus;
  double hint = 0;  // the minimiser moves continuously with the velocity
  auto lambda_at = [&](double u) -> Rate {
    if (u < ulo - 1e-12 || u > uhi + 1e-12) return {-kInf, 0, 0};
    if (std::fabs(u - ulo) <= 1e-12) return {cone.edge_plus, 1e-12, 0};
    if (std::fabs(u - uhi) <= 1e-12) return {cone.edge_minus, 1e-12, 0};
    return legendre(ev, u, cone.edge_minus, cone.edge_plus, hint);
  };
  for (double x : v) {
    const Rate r = lambda_at(0.5 * x);
    out.lambda.push_back(r.value);
    out.error.push_back(r.err);
  }
  const Rate top = ev.weighted(0.0);
  double serr = 0;
  out.peak = top.value;
  out.peak_error = top.err;
  out.peak_velocity = -2 * ev.slope(0.0, top.k, &serr);
  if (std::fabs(out.peak_velocity) < 2 * serr) out.peak_velocity = 0.0;
  const Rate abs0 = lambda_at(0.0);
  out.absolute = abs0.value;
  out.absolute_error = abs0.err;
  if (!(out.peak > 10 * out.peak_error + 1e-12)) {
    out.butterfly_left = out.butterfly_right = kNaN;
    out.butterfly_error = kNaN;
    return out;
  }
  // u_B+ = min over t > 0 of Lambda(-t)/t (the cone's edge if lambda >= 0 there);
  // u_B- = -min over t > 0 of Lambda(t)/t. g(t) = Lambda(-+t)/t is
  // quasi-convex (sublevel sets {Lambda <= c t} are convex): golden section
  // in ln t after a scan.
  auto front = [&](double dir, double edge_value, double cone_speed, double& speed, double& err) {
    if (edge_value >= 0) {  // still growing at the light cone: the front runs at it
      speed = 2 * cone_speed, err = 0;
      return;
    }
    auto g = [&](double lt, double* e) {
      const double t = std::exp(lt);
      const Rate r = ev.weighted(dir * t);
      if (e) *e = r.err / t;
      return r.value / t;
    };
    const int G = 41;
    double best = kInf, bl = 0;
    std::vector<double> lts(G), gs(G);
    for (int j = 0; j < G; ++j) {
      lts[j] = -8.0 + 14.0 * j / (G - 1);  // t in [e^-8, e^6]
      gs[j] = g(lts[j], nullptr);
      if (gs[j] < best) best = gs[j], bl = lts[j];
    }
    double a = bl - 14.0 / (G - 1), b = bl + 14.0 / (G - 1);
    const double gr = 0.5 * (std::sqrt(5.0) - 1.0);
    double x1 = b - gr * (b - a), x2 = a + gr * (b - a), e1 = 0, e2 = 0;
    double f1 = g(x1, &e1), f2 = g(x2, &e2);
    while (b - a > 1e-9) {
      if (f1 <= f2) {
        b = x2, x2 = x1, f2 = f1, e2 = e1;
        x1 = b - gr * (b - a);
        f1 = g(x1, &e1);
      } else {
        a = x1, x1 = x2, f1 = f2, e1 = e2;
        x2 = a + gr * (b - a);
        f2 = g(x2, &e2);
      }
    }
    const double m = std::min({f1, f2, best});
    speed = 2 * m;  // sites per period
    err = 2 * (std::max(e1, e2) + 1e-10 * std::fabs(m));
  };
  double sr = 0, er = 0, sl = 0, el = 0;
  front(-1.0, cone.edge_minus, uhi, sr, er);
  front(+1.0, cone.edge_plus, -ulo, sl, el);
  out.butterfly_right = sr;
  out.butterfly_left = -sl + 0.0;
  out.butterfly_error = std::max(er, el);
  return out;
}

}  // namespace toral

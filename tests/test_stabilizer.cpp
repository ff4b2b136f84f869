// Tests of kernels/stabilizer: exact stabilizer entropies of integer
// symplectic (Clifford) brick-wall circuits. Each numeric check names its
// source. The reference for small systems is an explicit state vector built
// here from the gates (permutations |q> -> |A q mod N>, the Fourier gate) with
// entropies from LAPACK singular values.
#include <gtest/gtest.h>

#include <algorithm>
#include <array>
#include <cmath>
#include <complex>
#include <numeric>
#include <random>
#include <stdexcept>

#define lapack_complex_float std::complex<float>
#define lapack_complex_double std::complex<double>
#include <lapacke.h>

#include "families.hpp"
#include "model.hpp"
#include "stabilizer.hpp"
#include "test_gates.hpp"

using namespace toral;
using cd = std::complex<double>;
using i64 = std::int64_t;

namespace {

const double kTol = 1e-9;

using testgates::m2;

// The quantum Fourier transform on one site: label (q, p) -> (-p, q).
const Mat2 kFourier = m2(0, -1, 1, 0);

// A random position gate: a product of elementary shears [[1,k],[0,1]],
// [[1,0],[k,1]] and, sometimes, a swap or a reflection (det -1); generators of
// GL(2, Z) (common practice).
Mat2 random_position_gate(std::mt19937_64& rng) {
  std::uniform_int_distribution<int> k(-2, 2), coin(0, 3);
  Mat2 A = Mat2::identity();
  for (int step = 0; step < 3; ++step) {
    const int kk = k(rng);
    A = checked_matmul(step % 2 ? m2(1, kk, 0, 1) : m2(1, 0, kk, 1), A);
  }
  if (coin(rng) == 0) A = checked_matmul(m2(0, 1, 1, 0), A);
  if (coin(rng) == 0) A = checked_matmul(m2(1, 0, 0, -1), A);
  return A;
}

// A random symplectic 4x4 gate on (q_a,p_a,q_b,p_b): a product of elementary
// symplectic shears (generators of Sp(4, Z); common practice).
Mat4 random_symplectic4(std::mt19937_64& rng) {
  std::uniform_int_distribution<int> pick(0, 3), coef(-2, 2);
  Mat4 G = Mat4::identity();
  for (int step = 0; step < 5; ++step) {
    int c = coef(rng);
    if (c == 0) c = 1;
    G = checked_matmul(testgates::elementary_shear4(pick(rng), c), G);
  }
  return G;
}

Circuit position_circuit(i64 L, Boundary bc, std::mt19937_64& rng) {
  Circuit c;
  c.L = L;
  c.boundary = bc;
  for (i64 b = 0; b < c.bond_count(); ++b) c.bonds.push_back(BondGate::position(random_position_gate(rng)));
  return c;
}

// Position bonds and a one-site layer of Fourier gates on a random subset.
Circuit fourier_circuit(i64 L, Boundary bc, std::mt19937_64& rng) {
  Circuit c = position_circuit(L, bc, rng);
  std::uniform_int_distribution<int> coin(0, 1);
  for (i64 i = 0; i < L; ++i) c.sites.push_back(coin(rng) ? kFourier : Mat2::identity());
  return c;
}

Circuit symplectic_circuit(i64 L, Boundary bc, std::mt19937_64& rng, bool sites) {
  Circuit c;
  c.L = L;
  c.boundary = bc;
  for (i64 b = 0; b < c.bond_count(); ++b) c.bonds.push_back(BondGate::symplectic(random_symplectic4(rng)));
  if (sites) {
    std::uniform_int_distribution<int> d(-2, 2);
    for (i64 i = 0; i < L; ++i) c.sites.push_back(family_matrix("shear2", {d(rng), d(rng)}));
  }
  return c;
}

std::vector<StabilizerSite> random_init(i64 L, i64 N, std::mt19937_64& rng) {
  std::uniform_int_distribution<int> kind(0, 2);
  std::uniform_int_distribution<i64> coef(-N, 2 * N);
  std::vector<StabilizerSite> init;
  for (i64 i = 0; i < L; ++i) {
    const int k = kind(rng);
    if (k == 0) {
      init.push_back(StabilizerSite::position());
    } else if (k == 1) {
      init.push_back(StabilizerSite::momentum());
    } else {
      i64 a, b;
      do {
        a = coef(rng);
        b = coef(rng);
      } while (std::gcd(std::gcd(((a % N) + N) % N, ((b % N) + N) % N), N) != 1);
      init.push_back(StabilizerSite::line(a, b));
    }
  }
  return init;
}

std::vector<i64> range(i64 lo, i64 hi) {
  std::vector<i64> r(static_cast<std::size_t>(hi - lo));
  std::iota(r.begin(), r.end(), lo);
  return r;
}

// ---- explicit state vectors ------------------------------------------------
// Basis index sum_i q_i N^i (site 0 least significant).
struct StateVector {
  i64 N, L;
  std::vector<i64> pw;
  std::vector<cd> psi;

  StateVector(i64 N_, i64 L_) : N(N_), L(L_), pw(static_cast<std::size_t>(L_ + 1), 1) {
    for (i64 i = 1; i <= L; ++i) pw[i] = pw[i - 1] * N;
  }
  i64 digit(i64 idx, i64 site) const { return (idx / pw[site]) % N; }
};

// The N x N matrix of X^a Z^b: X^a Z^b |q> = w^{b q} |q + a> (definition).
std::vector<cd> weyl_matrix(i64 N, i64 a, i64 b) {
  std::vector<cd> W(static_cast<std::size_t>(N * N), 0.0);
  for (i64 q = 0; q < N; ++q) {
    const double ph = 2.0 * M_PI * static_cast<double>(((b % N + N) % N) * q % N) / static_cast<double>(N);
    W[static_cast<std::size_t>((((q + a) % N + N) % N) * N + q)] = std::polar(1.0, ph);
  }
  return W;
}

// One-site state stabilised (up to phase) by X^a Z^b: an eigenvector of that
// unitary (LAPACK zgeev); its eigenvalues are distinct when gcd(a,b,N) = 1.
std::vector<cd> site_vector(i64 N, const StabilizerSite& s) {
  std::vector<cd> v(static_cast<std::size_t>(N), 0.0);
  if (s.kind == LocalState::Position) {
    v[0] = 1.0;  // |q = 0>
    return v;
  }
  if (s.kind == LocalState::Momentum) {
    std::fill(v.begin(), v.end(), cd(1.0 / std::sqrt(static_cast<double>(N)), 0.0));  // |p = 0>
    return v;
  }
  std::vector<cd> W = weyl_matrix(N, s.a, s.b), A = W, w(static_cast<std::size_t>(N)),
                  vr(static_cast<std::size_t>(N * N));
  const lapack_int n = static_cast<lapack_int>(N);
  cd dummy;
  const lapack_int info = LAPACKE_zgeev(LAPACK_ROW_MAJOR, 'N', 'V', n, A.data(), n, w.data(), &dummy, 1,
                                        vr.data(), n);
  EXPECT_EQ(info, 0);
  double nrm = 0.0;
  for (i64 i = 0; i < N; ++i) {
    v[i] = vr[static_cast<std::size_t>(i * N)];
    nrm += std::norm(v[i]);
  }
  for (auto& x : v) x /= std::sqrt(nrm);
  // residual |W v - lambda v| (LAPACK's own output, checked)
  double res = 0.0;
  for (i64 i = 0; i < N; ++i) {
    cd acc = 0.0;
    for (i64 j = 0; j < N; ++j) acc += W[static_cast<std::size_t>(i * N + j)] * v[j];
    res += std::norm(acc - w[0] * v[i]);
  }
  EXPECT_LT(std::sqrt(res), 1e-12);
  return v;
}

StateVector product_state(i64 N, const std::vector<StabilizerSite>& init) {
  const i64 L = static_cast<i64>(init.size());
  StateVector s(N, L);
  std::vector<std::vector<cd>> f;
  for (const auto& site : init) f.push_back(site_vector(N, site));
  s.psi.assign(static_cast<std::size_t>(s.pw[L]), 1.0);
  for (i64 idx = 0; idx < s.pw[L]; ++idx)
    for (i64 i = 0; i < L; ++i) s.psi[idx] *= f[i][s.digit(idx, i)];
  return s;
}

// |.. q_a .. q_b ..> -> |.. (A q)_a .. (A q)_b ..> mod N (a permutation for det A = +-1).
void apply_position_gate(StateVector& s, i64 a, i64 b, const Mat2& A) {
  std::vector<cd> out(s.psi.size(), 0.0);
  for (i64 idx = 0; idx < s.pw[s.L]; ++idx) {
    const i64 qa = s.digit(idx, a), qb = s.digit(idx, b);
    const i64 na = (((A(0, 0) * qa + A(0, 1) * qb) % s.N) + s.N) % s.N;
    const i64 nb = (((A(1, 0) * qa + A(1, 1) * qb) % s.N) + s.N) % s.N;
    out[idx + (na - qa) * s.pw[a] + (nb - qb) * s.pw[b]] += s.psi[idx];
  }
  s.psi = std::move(out);
}

// F|q> = N^-1/2 sum_p w^{p q} |p> on one site.
void apply_fourier(StateVector& s, i64 site) {
  std::vector<cd> out(s.psi.size(), 0.0);
  const double norm = 1.0 / std::sqrt(static_cast<double>(s.N));
  for (i64 idx = 0; idx < s.pw[s.L]; ++idx) {
    const i64 q = s.digit(idx, site), base = idx - q * s.pw[site];
    for (i64 p = 0; p < s.N; ++p)
      out[base + p * s.pw[site]] += std::polar(norm, 2.0 * M_PI * static_cast<double>(p * q % s.N) / s.N) * s.psi[idx];
  }
  s.psi = std::move(out);
}

// One period in the order of model.hpp: even bonds, odd bonds, one-site layer.
void apply_period(StateVector& s, const Circuit& c) {
  for (int parity = 0; parity < 2; ++parity)
    for (i64 b = parity; b < c.bond_count(); b += 2) {
      const BondGate& g = c.bonds[static_cast<std::size_t>(b)];
      ASSERT_EQ(g.kind, BondKind::Position) << "the state-vector reference handles position gates only";
      apply_position_gate(s, b, (b + 1) % c.L, g.A);
    }
  for (i64 i = 0; i < static_cast<i64>(c.sites.size()); ++i) {
    const Mat2& g = c.sites[static_cast<std::size_t>(i)];
    if (g == kFourier)
      apply_fourier(s, i);
    else
      ASSERT_EQ(g, Mat2::identity()) << "the state-vector reference handles Fourier and identity site gates only";
  }
}

// von Neumann entropy (nats) of `region` from the singular values of the
// reshaped state (LAPACK zgesvd): S = -sum sigma^2 ln sigma^2. The matrix is
// laid out column-major and tall (rows = the larger side; the entropy is
// symmetric): OpenBLAS 0.3.21's zgemv_n reads past the end of the matrix in
// zgesvd (seen with valgrind), which crashed on LAPACKE's row-major copy of
// wide matrices; our own column-major buffer carries slack instead.
double svd_entropy(const StateVector& s, const std::vector<i64>& region) {
  std::vector<char> in(static_cast<std::size_t>(s.L), 0);
  for (i64 r : region) in.at(static_cast<std::size_t>(r)) = 1;
  i64 dA = 1;
  for (std::size_t r = 0; r < region.size(); ++r) dA *= s.N;
  const i64 dB = s.pw[s.L] / dA;
  if (dA == 1 || dB == 1) return 0.0;
  const bool a_rows = dA >= dB;
  const i64 rows = a_rows ? dA : dB, cols = a_rows ? dB : dA;
  // one zero column of slack: the same zgemv_n also reads one element past
  // the end of tall matrices (valgrind); zeros there cannot change a result
  std::vector<cd> M(static_cast<std::size_t>(dA * dB + rows), 0.0);
  for (i64 idx = 0; idx < s.pw[s.L]; ++idx) {
    i64 ia = 0, ib = 0, ma = 1, mb = 1;
    for (i64 i = 0; i < s.L; ++i) {
      const i64 q = s.digit(idx, i);
      if (in[i]) {
        ia += q * ma;
        ma *= s.N;
      } else {
        ib += q * mb;
        mb *= s.N;
      }
    }
    const i64 r = a_rows ? ia : ib, c = a_rows ? ib : ia;
    M[static_cast<std::size_t>(c * rows + r)] = s.psi[idx];
  }
  std::vector<double> sv(static_cast<std::size_t>(cols)), superb(static_cast<std::size_t>(cols));
  cd dummy;
  const lapack_int info = LAPACKE_zgesvd(LAPACK_COL_MAJOR, 'N', 'N', static_cast<lapack_int>(rows),
                                         static_cast<lapack_int>(cols), M.data(), static_cast<lapack_int>(rows),
                                         sv.data(), &dummy, 1, &dummy, 1, superb.data());
  EXPECT_EQ(info, 0);
  double S = 0.0;
  for (double x : sv) {
    const double p = x * x;
    if (p > 1e-300) S -= p * std::log(p);
  }
  return S;
}

std::vector<StabilizerMethod> methods_for(i64 N) {
  std::vector<StabilizerMethod> m = {StabilizerMethod::Auto, StabilizerMethod::Howell};
  i64 n = N;
  bool sqfree = true;
  for (i64 p = 2; p * p <= n; ++p)
    if (n % p == 0) {
      n /= p;
      if (n % p == 0) sqfree = false;
    }
  if (sqfree) m.push_back(StabilizerMethod::Echelon);
  return m;
}

}  // namespace

// --- 1. basis states of position-class circuits --------------------------

TEST(Stabilizer, PositionClassKeepsProductStatesUnentangled) {
  // A position-class circuit permutes the basis |q>, so a product of position
  // eigenstates stays a basis state, and the uniform superposition (all sites
  // in momentum eigenstates) stays uniform: S = 0 for every region and t
  // (common practice).
  std::mt19937_64 rng(11);
  for (i64 N : {2, 3, 4, 5, 6, 8, 12, 30}) {
    for (Boundary bc : {Boundary::Periodic, Boundary::Open}) {
      const i64 L = bc == Boundary::Periodic ? 32 : 33;
      const Circuit c = position_circuit(L, bc, rng);
      for (const auto& site : {StabilizerSite::position(), StabilizerSite::momentum()}) {
        const std::vector<StabilizerSite> init(static_cast<std::size_t>(L), site);
        const auto prof = stabilizer_profile(c, N, init, 40);
        for (const auto& row : prof)
          for (double s : row) ASSERT_EQ(s, 0.0) << "N = " << N;  // common practice: basis states stay product
        const auto curve = stabilizer_entropy_curve(c, N, init, {0, 3, 4, 5, 17, L - 1}, 40);
        for (double s : curve) ASSERT_EQ(s, 0.0) << "N = " << N;  // common practice
      }
      // ... while the same circuit does entangle a mixed product (a check that
      // the zeros above are not vacuous; not a reference value).
      std::vector<StabilizerSite> mixed;
      for (i64 i = 0; i < L; ++i) mixed.push_back(i % 2 ? StabilizerSite::momentum() : StabilizerSite::position());
      double top = 0.0;
      for (const auto& row : stabilizer_profile(c, N, mixed, 10)) top = std::max(top, *std::max_element(row.begin(), row.end()));
      EXPECT_GT(top, 0.0) << "N = " << N;
    }
  }
}

// --- 2. explicit state vectors ---------------------------------------------

TEST(Stabilizer, MatchesStateVectorEntropies) {
  // Reference: the explicit state vector of the same circuit and initial
  // product, entropies from LAPACK singular values (definition of the von
  // Neumann entropy of a pure bipartite state).
  struct Case {
    i64 N, L;
    Boundary bc;
  };
  const std::vector<Case> cases = {
      {2, 10, Boundary::Periodic}, {2, 11, Boundary::Open}, {3, 8, Boundary::Periodic}, {3, 9, Boundary::Open},
      {4, 6, Boundary::Periodic},  {4, 7, Boundary::Open},  {5, 6, Boundary::Periodic}, {5, 7, Boundary::Open},
      {6, 6, Boundary::Periodic},  {6, 5, Boundary::Open},  {7, 4, Boundary::Periodic}, {7, 5, Boundary::Open},
      {8, 4, Boundary::Periodic},  {8, 5, Boundary::Open},  {9, 4, Boundary::Periodic}, {9, 5, Boundary::Open},
      {2, 2, Boundary::Periodic},  {3, 2, Boundary::Periodic}, {5, 3, Boundary::Open}, {12, 4, Boundary::Periodic},
  };
  const i64 T = 5;
  std::mt19937_64 rng(2024);
  int compared = 0, entangled = 0;
  for (const auto& [N, L, bc] : cases) {
    for (int variant = 0; variant < 2; ++variant) {
      const Circuit c = variant == 0 ? position_circuit(L, bc, rng) : fourier_circuit(L, bc, rng);
      const auto init = random_init(L, N, rng);
      std::vector<std::vector<i64>> regions = {{0}, {L - 1}, range(1, L / 2 + 1)};
      if (L > 2) regions.push_back({1, 2});
      if (L > 3) regions.push_back({0, 2, L - 1});  // not contiguous
      // reference entropies [t][x] for prefixes and [t][r] for the regions
      StateVector psi = product_state(N, init);
      std::vector<std::vector<double>> ref_prefix, ref_region;
      for (i64 t = 0; t <= T; ++t) {
        if (t > 0) apply_period(psi, c);
        std::vector<double> p, r;
        for (i64 x = 0; x <= L; ++x) p.push_back(svd_entropy(psi, range(0, x)));
        for (const auto& reg : regions) r.push_back(svd_entropy(psi, reg));
        ref_prefix.push_back(p);
        ref_region.push_back(r);
      }
      for (StabilizerMethod m : methods_for(N)) {
        const auto prof = stabilizer_profile(c, N, init, T, 1, m);
        ASSERT_EQ(prof.size(), static_cast<std::size_t>(T + 1));
        for (i64 t = 0; t <= T; ++t)
          for (i64 x = 0; x <= L; ++x)
            ASSERT_NEAR(prof[t][x], ref_prefix[t][x], kTol)  // state vector + SVD (definition)
                << "N=" << N << " L=" << L << " method=" << static_cast<int>(m) << " t=" << t << " x=" << x;
        for (std::size_t r = 0; r < regions.size(); ++r) {
          const auto curve = stabilizer_entropy_curve(c, N, init, regions[r], T, m);
          for (i64 t = 0; t <= T; ++t)
            ASSERT_NEAR(curve[t], ref_region[t][r], kTol)  // state vector + SVD (definition)
                << "N=" << N << " L=" << L << " method=" << static_cast<int>(m) << " t=" << t << " region " << r;
        }
        ++compared;
      }
      double top = 0.0;
      for (const auto& row : ref_prefix) top = std::max(top, *std::max_element(row.begin(), row.end()));
      if (top > 0.5 * std::log(2.0)) ++entangled;
    }
  }
  EXPECT_GE(compared, 2 * 20 * 2);
  // the comparison is not vacuous: most reference states are entangled
  EXPECT_GE(entangled, 30) << "of 40 circuits";
}

// --- 3. the controlled-NOT --------------------------------------------------

TEST(Stabilizer, ShearIsControlledNotForQubits) {
  const Mat2 A = m2(1, 1, 0, 1);
  // (a) On basis states, |q_a q_b> -> |q_a + q_b, q_b> mod 2: the CNOT truth
  //     table with control b, target a (common practice; Nielsen & Chuang 1.3.6).
  const int truth[4][2] = {{0, 0}, {1, 1}, {1, 0}, {0, 1}};  // image of (q_a, q_b) = (0,0),(0,1),(1,0),(1,1)
  for (int qa = 0; qa < 2; ++qa)
    for (int qb = 0; qb < 2; ++qb) {
      StateVector s(2, 2);
      s.psi.assign(4, 0.0);
      s.psi[static_cast<std::size_t>(qa + 2 * qb)] = 1.0;
      apply_position_gate(s, 0, 1, A);
      const int t = 2 * qa + qb;
      const i64 expect = truth[t][0] + 2 * truth[t][1];
      EXPECT_EQ(std::abs(s.psi[static_cast<std::size_t>(expect)]), 1.0) << qa << qb;  // CNOT truth table
    }
  // (b) Its Weyl-label action mod 2 is the CNOT conjugation table: X_a -> X_a,
  //     X_b -> X_a X_b, Z_a -> Z_a Z_b, Z_b -> Z_b (Gottesman, quant-ph/9705052).
  const Mat4 G = embed_position_gate(A);  // on (q_a, p_a, q_b, p_b)
  auto image = [&](int j) {
    std::array<i64, 4> v{};
    for (int i = 0; i < 4; ++i) v[i] = ((G(i, j) % 2) + 2) % 2;
    return v;
  };
  EXPECT_EQ(image(0), (std::array<i64, 4>{1, 0, 0, 0}));  // X_a -> X_a
  EXPECT_EQ(image(2), (std::array<i64, 4>{1, 0, 1, 0}));  // X_b -> X_a X_b
  EXPECT_EQ(image(1), (std::array<i64, 4>{0, 1, 0, 1}));  // Z_a -> Z_a Z_b
  EXPECT_EQ(image(3), (std::array<i64, 4>{0, 0, 0, 1}));  // Z_b -> Z_b
  // (c) Through the kernel: two sites, one bond (open chain), one CNOT per
  //     period. |0>_a |+>_b -> Bell pair, S = ln 2; CNOT^2 = 1 undoes it.
  //     |+>_a |0>_b is unchanged (the control is |0>), S = 0 (common practice).
  Circuit c;
  c.L = 2;
  c.boundary = Boundary::Open;
  c.bonds = {BondGate::position(A)};
  const auto bell = stabilizer_entropy_curve(c, 2, {StabilizerSite::position(), StabilizerSite::momentum()}, {0}, 2);
  EXPECT_NEAR(bell[0], 0.0, 1e-15);
  EXPECT_NEAR(bell[1], std::log(2.0), 1e-15);  // Bell pair: ln 2
  EXPECT_NEAR(bell[2], 0.0, 1e-15);            // CNOT^2 = identity
  const auto prod = stabilizer_entropy_curve(c, 2, {StabilizerSite::momentum(), StabilizerSite::position()}, {0}, 2);
  for (double s : prod) EXPECT_NEAR(s, 0.0, 1e-15);
  const auto prof = stabilizer_profile(c, 2, {StabilizerSite::position(), StabilizerSite::momentum()}, 1);
  EXPECT_NEAR(prof[1][1], std::log(2.0), 1e-15);  // same Bell pair through the profile
}

// --- 4. profile vs regions, caps and light cone -----------------------------

TEST(Stabilizer, ProfileMatchesRegionRanksAndRespectsBounds) {
  // (i) The gauge profile must equal the entropies of the regions [0, x)
  //     computed independently (ranks / Howell forms of projections) and the
  //     other methods (identity S_A = ln|P_A V| - |A| ln N, Fattal et al. 2004).
  // (ii) S([0,x)) <= min(x, L-x) ln N (dimension of the smaller side).
  // (iii) One period changes S([0,x)) by at most 2 ln N per cut crossed by a
  //     gate: one bond crosses each cut per period, a gate on C^N (x) C^N
  //     changes entanglement by at most ln N^2 (its operator Schmidt rank is
  //     at most N^2; e.g. Nielsen et al., PRA 67, 052301 (2003)); on a ring
  //     [0, x) has two cuts.
  std::mt19937_64 rng(77);
  const i64 T = 12;
  for (i64 N : {2, 3, 4, 5, 6, 8, 9, 12, 30}) {
    for (Boundary bc : {Boundary::Periodic, Boundary::Open}) {
      for (int kind = 0; kind < 3; ++kind) {
        const i64 L = bc == Boundary::Periodic ? 12 : 11;
        const Circuit c = kind == 0   ? symplectic_circuit(L, bc, rng, true)
                          : kind == 1 ? symplectic_circuit(L, bc, rng, false)
                                      : fourier_circuit(L, bc, rng);
        const auto init = random_init(L, N, rng);
        const double lnN = std::log(static_cast<double>(N));
        const auto prof = stabilizer_profile(c, N, init, T);
        for (StabilizerMethod m : methods_for(N)) {
          const auto other = stabilizer_profile(c, N, init, T, 1, m);
          for (i64 t = 0; t <= T; ++t)
            for (i64 x = 0; x <= L; ++x)
              ASSERT_NEAR(other[t][x], prof[t][x], 1e-12) << "N=" << N << " method " << static_cast<int>(m);
        }
        for (i64 x = 0; x <= L; ++x) {
          // Auto treats an arc by rotating it to a prefix (gauge); Echelon uses
          // ranks of projections, Howell Howell forms of projections.
          for (StabilizerMethod m : methods_for(N)) {
            const auto curve = stabilizer_entropy_curve(c, N, init, range(0, x), T, m);
            const auto comp = stabilizer_entropy_curve(c, N, init, range(x, L), T, m);  // purity: S_A = S_complement
            for (i64 t = 0; t <= T; ++t) {
              ASSERT_NEAR(curve[t], prof[t][x], 1e-12) << "N=" << N << " t=" << t << " x=" << x;
              ASSERT_NEAR(comp[t], prof[t][x], 1e-12) << "N=" << N << " t=" << t << " x=" << x;
            }
          }
        }
        // an arc through the wrap-around (sites L-2, L-1, 0, 1) and a region
        // of two pieces: Auto (rotated gauge / rank) against Howell
        for (const auto& reg : std::vector<std::vector<i64>>{{L - 2, L - 1, 0, 1}, {0, 1, 5, 6, 7}}) {
          const auto a = stabilizer_entropy_curve(c, N, init, reg, T);
          const auto h = stabilizer_entropy_curve(c, N, init, reg, T, StabilizerMethod::Howell);
          for (i64 t = 0; t <= T; ++t) ASSERT_NEAR(a[t], h[t], 1e-12) << "N=" << N << " t=" << t;
        }
        const double per_period = (bc == Boundary::Periodic ? 4.0 : 2.0) * lnN;
        double top = 0.0;
        for (i64 t = 0; t <= T; ++t)
          for (i64 x = 0; x <= L; ++x) {
            top = std::max(top, prof[t][x]);
            ASSERT_GE(prof[t][x], 0.0);
            ASSERT_LE(prof[t][x], static_cast<double>(std::min(x, L - x)) * lnN + 1e-12);  // Hilbert-space cap
            if (t > 0) {
              ASSERT_LE(std::abs(prof[t][x] - prof[t - 1][x]), per_period + 1e-12);  // light cone
            }
          }
        EXPECT_GT(top, 0.0) << "N=" << N;  // non-vacuous
      }
    }
  }
}

TEST(Stabilizer, IncrementalGaugeMatchesFullEchelonOnLargeSystems) {
  // The incremental clipped gauge against a full re-echelonisation every
  // period (M4RI mzd_echelonize for p = 2, FLINT nmod_mat_rref for odd p),
  // on systems far beyond state vectors (reference: library echelon forms).
  // Uniform cat-map brick walls reach the volume-law cap, which stresses the
  // gauge update (and, on rings, the wrap-around bond); random Floquet
  // circuits mostly stay weakly entangled.
  std::mt19937_64 rng(5);
  const Mat2 cat = m2(2, 1, 1, 1);
  auto uniform = [&](i64 L, Boundary bc, const Mat2& site) {
    Circuit c;
    c.L = L;
    c.boundary = bc;
    c.bonds.assign(static_cast<std::size_t>(c.bond_count()), BondGate::position(cat));
    c.sites.assign(static_cast<std::size_t>(L), site);
    return c;
  };
  struct Case {
    i64 N, L, T, stride;
    Boundary bc;
    int kind;  // 0: cat + Fourier sites, 1: cat + shear sites, 2: random symplectic
  };
  for (const auto& [N, L, T, stride, bc, kind] : std::vector<Case>{{2, 256, 200, 3, Boundary::Periodic, 0},
                                                                   {2, 257, 150, 1, Boundary::Open, 1},
                                                                   {2, 130, 60, 1, Boundary::Periodic, 2},
                                                                   {3, 64, 60, 2, Boundary::Periodic, 0},
                                                                   {3, 61, 60, 1, Boundary::Open, 2},
                                                                   {7, 45, 40, 1, Boundary::Open, 1},
                                                                   {6, 48, 40, 1, Boundary::Periodic, 0}}) {
    const Circuit c = kind == 0   ? uniform(L, bc, kFourier)
                      : kind == 1 ? uniform(L, bc, family_matrix("shear2", {1, 1}))
                                  : symplectic_circuit(L, bc, rng, true);
    const auto init = random_init(L, N, rng);
    const auto fast = stabilizer_profile(c, N, init, T, stride);
    const auto full = stabilizer_profile(c, N, init, T, stride, StabilizerMethod::Echelon);
    ASSERT_EQ(fast.size(), static_cast<std::size_t>(T / stride + 1));
    ASSERT_EQ(fast, full) << "N=" << N << " L=" << L;  // library echelon form, exactly
    if (kind < 2) {
      // the cat walls saturate at the centre (volume law): the comparison above
      // covered highly entangled states (non-vacuity, not a reference value)
      double top = 0.0;
      for (const auto& row : fast) top = std::max(top, row[static_cast<std::size_t>(L / 2)]);
      EXPECT_GT(top, 0.9 * static_cast<double>(L / 2) * std::log(static_cast<double>(N))) << "N=" << N;
    }
  }
}

TEST(Stabilizer, LargeModuliAgreeAcrossMethods) {
  // N = 2^61 - 1 (a Mersenne prime), 2^62 (Howell only) and a large
  // square-free N: independent paths agree (gauge vs Howell vs echelon; for
  // non-square-free N the Howell profile of sub-modules vs the Howell sizes
  // of projections). No external reference exists at this size.
  std::mt19937_64 rng(9);
  const i64 L = 8, T = 8;
  for (i64 N : {i64(2305843009213693951), i64(1) << 62, i64(2147483647) * 3 * 5}) {
    const Circuit c = symplectic_circuit(L, Boundary::Periodic, rng, true);
    const auto init = random_init(L, N, rng);
    const auto prof = stabilizer_profile(c, N, init, T);
    const auto howell = stabilizer_profile(c, N, init, T, 1, StabilizerMethod::Howell);
    for (i64 t = 0; t <= T; ++t)
      for (i64 x = 0; x <= L; ++x) {
        ASSERT_NEAR(prof[t][x], howell[t][x], 1e-9) << "N=" << N;
        const auto curve = stabilizer_entropy_curve(c, N, init, range(0, x), T);
        ASSERT_NEAR(curve[t], prof[t][x], 1e-9) << "N=" << N;
      }
    EXPECT_GT(prof[T][L / 2], 0.0);
  }
}

TEST(Stabilizer, StrideSamplesTheSameTrajectory) {
  // profile with stride s is every s-th row of the stride-1 profile (definition).
  std::mt19937_64 rng(3);
  const Circuit c = symplectic_circuit(20, Boundary::Periodic, rng, true);
  const auto init = random_init(20, 3, rng);
  const auto all = stabilizer_profile(c, 3, init, 17);
  const auto some = stabilizer_profile(c, 3, init, 17, 4);
  ASSERT_EQ(some.size(), 5u);  // t = 0, 4, 8, 12, 16
  for (std::size_t k = 0; k < some.size(); ++k) EXPECT_EQ(some[k], all[4 * k]);
}

// --- 5. errors --------------------------------------------------------------

TEST(Stabilizer, RejectsBadInput) {
  std::mt19937_64 rng(1);
  const Circuit c = position_circuit(4, Boundary::Periodic, rng);
  const std::vector<StabilizerSite> ok(4, StabilizerSite::position());
  std::string why;
  for (i64 N : {1, 0, -5}) {
    EXPECT_FALSE(stabilizer_dimension_supported(N, why));
    EXPECT_NE(why.find("N >= 2"), std::string::npos) << why;
    EXPECT_THROW(stabilizer_profile(c, N, ok, 2), std::invalid_argument);
    EXPECT_THROW(stabilizer_entropy_curve(c, N, ok, {0}, 2), std::invalid_argument);
  }
  for (i64 N : std::vector<i64>{2, 3, 4, 6, 12, i64(1) << 62}) EXPECT_TRUE(stabilizer_dimension_supported(N, why)) << why;
  for (i64 N : {4, 8, 9, 12}) {
    EXPECT_TRUE(stabilizer_dimension_supported(N, why));
    EXPECT_NE(why.find("Howell"), std::string::npos) << why;
  }
  EXPECT_TRUE(stabilizer_dimension_supported(30, why));
  EXPECT_NE(why.find("square-free"), std::string::npos) << why;
  EXPECT_TRUE(stabilizer_dimension_supported(7, why));
  EXPECT_NE(why.find("prime"), std::string::npos) << why;

  // lines that are not Lagrangian mod N: gcd(a, b, N) != 1
  for (auto [N, a, b] : std::vector<std::array<i64, 3>>{{2, 0, 0}, {3, 0, 0}, {4, 2, 2}, {4, 0, 2}, {6, 3, 0},
                                                        {6, -2, 4}, {5, 5, 10}}) {
    std::vector<StabilizerSite> bad = ok;
    bad[2] = StabilizerSite::line(a, b);
    EXPECT_FALSE(stabilizer_site_valid(N, bad[2], why));
    try {
      stabilizer_profile(c, N, bad, 1);
      ADD_FAILURE() << "line (" << a << "," << b << ") mod " << N << " accepted";
    } catch (const std::invalid_argument& e) {
      EXPECT_NE(std::string(e.what()).find("site 2"), std::string::npos) << e.what();
      EXPECT_NE(std::string(e.what()).find("gcd"), std::string::npos) << e.what();
    }
    EXPECT_THROW(stabilizer_entropy_curve(c, N, bad, {0}, 1), std::invalid_argument);
  }
  // valid lines, including ones with no invertible component mod 4 or 6
  for (auto [N, a, b] : std::vector<std::array<i64, 3>>{{4, 2, 1}, {6, 2, 3}, {6, -1, 0}, {3, 1, 1}})
    EXPECT_TRUE(stabilizer_site_valid(N, StabilizerSite::line(a, b), why)) << N << " " << a << " " << b;

  // sizes and ranges
  EXPECT_THROW(stabilizer_profile(c, 2, std::vector<StabilizerSite>(3), 1), std::invalid_argument);
  EXPECT_THROW(stabilizer_profile(c, 2, std::vector<StabilizerSite>(5), 1), std::invalid_argument);
  EXPECT_THROW(stabilizer_entropy_curve(c, 2, ok, {4}, 1), std::invalid_argument);
  EXPECT_THROW(stabilizer_entropy_curve(c, 2, ok, {-1}, 1), std::invalid_argument);
  EXPECT_THROW(stabilizer_entropy_curve(c, 2, ok, {1, 1}, 1), std::invalid_argument);
  EXPECT_THROW(stabilizer_entropy_curve(c, 2, ok, {0}, -1), std::invalid_argument);
  EXPECT_THROW(stabilizer_profile(c, 2, ok, -1), std::invalid_argument);
  EXPECT_THROW(stabilizer_profile(c, 2, ok, 3, 0), std::invalid_argument);
  // the full-echelon reference needs square-free N
  EXPECT_THROW(stabilizer_profile(c, 4, ok, 1, 1, StabilizerMethod::Echelon), std::invalid_argument);
  // an invalid circuit is the model's error
  Circuit odd = c;
  odd.L = 5;
  EXPECT_THROW(stabilizer_profile(odd, 2, std::vector<StabilizerSite>(5), 1), ModelError);
  // empty region: zero entropy, not an error (definition)
  for (double s : stabilizer_entropy_curve(c, 5, ok, {}, 3)) EXPECT_EQ(s, 0.0);
}

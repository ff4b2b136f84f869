"""Exact zero exponents, honest accuracy estimates and stable Bloch blocks,
checked against sympy (exact factorisation of the characteristic polynomial)
and mpmath (eigenvalues at 50 digits, quadrature split at the kinks), on
matrices assembled here independently of toral from docs/model.md."""
import json
import random

import h5py
import mpmath
import numpy as np
import pytest
import sympy

from test_cli import write

# ---------------------------------------------------------------- reference model (docs/model.md)

J2 = [[0, 1], [-1, 0]]


def embed(A):
    """4x4 action of a position gate A on (q_a, p_a, q_b, p_b): q' = A q, p' = A^-T p."""
    (a, b), (c, d) = A
    det = a * d - b * c
    B = [[d * det, -c * det], [-b * det, a * det]]  # A^-T for det = +-1
    G = [[0] * 4 for _ in range(4)]
    for i in range(2):
        for j in range(2):
            G[2 * i][2 * j] = A[i][j]
            G[2 * i + 1][2 * j + 1] = B[i][j]
    return G


def assemble(L, boundary, G, g=None):
    """S = S_site S_odd S_even on (q_0..q_{L-1}, p_0..p_{L-1}) as a sympy matrix."""
    def layer(bonds):
        S = sympy.eye(2 * L)
        for a in bonds:
            b = (a + 1) % L
            idx = [a, L + a, b, L + b]  # (q_a, p_a, q_b, p_b)
            T = sympy.eye(2 * L)
            for i in range(4):
                for j in range(4):
                    T[idx[i], idx[j]] = G[i][j]
            S = T * S
        return S
    nb = L if boundary == "periodic" else L - 1
    S = layer([b for b in range(nb) if b % 2 == 1]) * layer([b for b in range(nb) if b % 2 == 0])
    if g is not None:
        T = sympy.zeros(2 * L)
        for i in range(L):
            T[i, i], T[i, L + i], T[L + i, i], T[L + i, L + i] = g[0][0], g[0][1], g[1][0], g[1][1]
        S = T * S
    return S


def exponents_mpmath(S, dps=50):
    with mpmath.workdps(dps):
        ev = mpmath.eig(mpmath.matrix(S.tolist()), left=False, right=False)
        return sorted((mpmath.log(abs(e)) for e in ev), reverse=True)


def exact_zero_count(S):
    """Unit-circle roots of det(x - S): cyclotomic factors count whole (Kronecker);
    other irreducible factors have simple roots, located at 60 digits."""
    x = sympy.Symbol("x")
    _, factors = sympy.factor_list(S.charpoly(x).as_expr(), x)
    count = 0
    for f, e in factors:
        p = sympy.Poly(f, x)
        if p.is_cyclotomic:
            count += e * p.degree()
            continue
        for r in sympy.Poly(f, x).nroots(n=60):
            if abs(abs(sympy.N(r, 60)) - 1) < sympy.Float("1e-40"):
                count += e
    return count


def bloch_charpoly(G, g):
    """det(x - M(z)) of the Bloch block M(z) = Site Odd(z) Even on
    (q_x, p_x, q_y, p_y), Odd(z) = [[G22, G21/z], [z G12, G11]] (docs/model.md),
    as a sympy expression in x and z, with its squarefree factorisation."""
    x, z = sympy.symbols("x z")
    Gs = sympy.Matrix(G)
    O = sympy.zeros(4)
    O[0:2, 0:2], O[0:2, 2:4] = Gs[2:4, 2:4], Gs[2:4, 0:2] / z
    O[2:4, 0:2], O[2:4, 2:4] = z * Gs[0:2, 2:4], Gs[0:2, 0:2]
    M = O * Gs
    if g is not None:
        M = sympy.diag(sympy.Matrix(g), sympy.Matrix(g)) * M
    F = sympy.expand((x * sympy.eye(4) - M).det() * z**4)
    _, sqf = sympy.sqf_list(F, x)
    return x, z, [(f, e) for f, e in sqf if sympy.degree(f, x) > 0]


def kinks(G, g):
    """Momenta k in (0, pi) where det(x - M(e^ik)) has a repeated root: the
    unit-circle zeros of the discriminant of its squarefree part (sympy),
    located by numpy."""
    x, z, sqf = bloch_charpoly(G, g)
    part = sympy.Mul(*[f for f, _ in sqf])
    D = sympy.factor(sympy.discriminant(part, x)) if sympy.degree(part, x) > 1 else sympy.Integer(1)
    out = []
    if D.has(z):
        for r in np.roots([complex(c) for c in sympy.Poly(sympy.numer(sympy.together(D)), z).all_coeffs()]):
            if abs(abs(r) - 1) < 1e-9 and 1e-9 < abs(np.angle(r)) < np.pi - 1e-9:
                out.append(abs(float(np.angle(r))))
    return sorted(set(round(k, 12) for k in out))


def bulk_ks_density(G, g, dps=25):
    """(1/pi) int_0^pi (1/2) sum_j max(0, ln|mu_j(k)|) dk with mpmath.quad on the
    pieces between the kinks (Jensen / Lind-Schmidt-Ward: the Mahler measure).
    The roots come from each squarefree factor (companion matrix, simple
    roots, accurate at dps digits, where an eigen-solver on the block itself,
    with its Jordan structure, would be only 10^(-dps/m) accurate), times
    its multiplicity."""
    x, z, sqf = bloch_charpoly(G, g)
    coeffs = [([sympy.lambdify(z, c, "mpmath") for c in sympy.Poly(f, x).all_coeffs()], e) for f, e in sqf]

    def roots(cs):  # eigenvalues of the companion matrix (no failure near a double root)
        n = len(cs) - 1
        if n == 1:
            return [-cs[1] / cs[0]]
        C = mpmath.zeros(n, n)
        for j in range(n):
            C[0, j] = -cs[j + 1] / cs[0]
        for i in range(1, n):
            C[i, i - 1] = 1
        return mpmath.eig(C, left=False, right=False)

    def f(k):
        zz = mpmath.expjpi(k / mpmath.pi)
        total = mpmath.mpf(0)
        for cs, e in coeffs:
            total += e * sum(max(mpmath.mpf(0), mpmath.log(abs(r))) for r in roots([c(zz) for c in cs]))
        return total / 2
    with mpmath.workdps(dps):
        pts = [mpmath.mpf(0)] + [mpmath.mpf(k) for k in kinks(G, g)] + [mpmath.pi]
        return float(mpmath.quad(f, pts) / mpmath.pi)


def point_json(run_toral, tmp_path, text, index=0):
    cfg = write(tmp_path, text)
    p = run_toral("point", cfg, "--index", index, "--json", check=True)
    return json.loads(p.stdout)


# ---------------------------------------------------------------- the audit's cases

ISSUE_GATE = [[1, -1, 1, 1], [0, 1, 0, 0], [0, 1, 0, -1], [0, 0, 1, 1]]
KINK_GATE = [[1, -1, 2, -1], [-1, 1, 1, 0], [0, -1, 3, -1], [1, -1, 0, 0]]
KINK_SITE = [[1, 1], [0, 1]]


def test_circuit_without_chaos_has_exactly_zero_exponents(run_toral, tmp_path):
    # det(x - S) = (x-1)^2 (x^2+x+1)^2 (x^6+x^3+1): every root a root of unity
    # (the audit; recomputed here with sympy), so h = 0 and nothing is unstable.
    x = sympy.Symbol("x")
    S = assemble(6, "periodic", ISSUE_GATE)
    assert sympy.factor(S.charpoly(x).as_expr()) == sympy.factor(
        (x - 1) ** 2 * (x**2 + x + 1) ** 2 * (x**6 + x**3 + 1))
    rec = point_json(run_toral, tmp_path, f"""
[[sweep]]
sites = 6
[sweep.bond]
kind = "symplectic"
matrix = {ISSUE_GATE}
[bounds]
regions = [1, 2]
local_dims = [2]
""")
    assert rec["/points/status"] == 0, rec["/points/message"]
    assert rec["/chaos/lambda_max"] == 0.0 and rec["/chaos/ks_rate"] == 0.0
    assert rec["/chaos/unstable_count"] == 0
    assert rec["/chaos/zero_count"] == 12 and rec["/chaos/zero_certified"] == 1
    assert rec["/chaos/exponents"] == [0.0] * 12
    assert rec["/limit/lambda_max"] == 0.0 and rec["/limit/ks_density"] == 0.0
    # cap / 0: an infinite saturation time (JSON has no inf: null)
    assert all(v is None for v in rec["/bounds/saturation_lyapunov"])


def test_bulk_limit_split_at_the_kink_meets_its_accuracy(run_toral, tmp_path):
    ks = kinks(KINK_GATE, KINK_SITE)
    assert len(ks) == 1 and ks[0] == pytest.approx(2.66297, abs=1e-5)  # the audit's k0
    ref = bulk_ks_density(KINK_GATE, KINK_SITE)
    assert ref == pytest.approx(1.010960242099476, abs=1e-14)  # the audit's mpmath value
    rec = point_json(run_toral, tmp_path, f"""
[[sweep]]
sites = 16
[sweep.bond]
kind = "symplectic"
matrix = {KINK_GATE}
[sweep.site]
matrix = {KINK_SITE}
""")
    assert rec["/points/status"] == 0
    acc = rec["/limit/accuracy"]
    assert acc <= 1e-10  # docs/model.md: the quadrature target
    assert abs(rec["/limit/ks_density"] - ref) <= acc


@pytest.mark.parametrize("big", [10_000, 1_000_000])
@pytest.mark.parametrize("kind", ["position", "symplectic"])
def test_large_gate_entries_are_stable(run_toral, tmp_path, big, kind):
    # [[N, 1], [N-1, 1]] (det 1) on a ring of 16: exponents up to ln(N^2);
    # the reference is mpmath at 50 digits on S assembled here.
    A = [[big, 1], [big - 1, 1]]
    G = embed(A)
    text = f"[[sweep]]\nsites = 16\n[sweep.bond]\n" + (
        f"matrix = {A}\n" if kind == "position" else f'kind = "symplectic"\nmatrix = {G}\n')
    rec = point_json(run_toral, tmp_path, text)
    assert rec["/points/status"] == 0, rec["/points/message"]
    ref = [float(v) for v in exponents_mpmath(assemble(16, "periodic", G))]
    ours = np.array(rec["/chaos/exponents"])
    assert len(ours) == 32
    err = rec["/chaos/accuracy/error_bound"]
    assert err < 1e-9
    np.testing.assert_allclose(ours, ref, atol=err + 1e-12, rtol=0)
    assert rec["/chaos/ks_rate"] == pytest.approx(sum(v for v in ref if v > 1e-9), abs=32 * err + 1e-10)
    if big == 1_000_000:
        assert rec["/chaos/lambda_max"] == pytest.approx(27.6310211159, abs=1e-9)  # the audit (mpmath)
        # The rate of S counts each of M's 8 unstable values twice (M and M^-T):
        # 16 x 27.631 = 442.096 (the audit's 221.048 is M's alone).
        assert rec["/chaos/ks_rate"] == pytest.approx(442.096305855, abs=1e-8)


# ---------------------------------------------------------------- random gates

def transvection(v, c):
    """x -> x + c <v, x> v, <v, x> = v^T J x: symplectic for integer v, c (common practice)."""
    J = sympy.diag(sympy.Matrix(J2), sympy.Matrix(J2))
    vv = sympy.Matrix(v)
    return sympy.eye(4) + c * vv * (vv.T * J)


def random_gates(seed, count):
    rng = random.Random(seed)
    J = sympy.diag(sympy.Matrix(J2), sympy.Matrix(J2))
    sites = [None, None, [[0, 1], [-1, 0]], [[1, 1], [-1, 0]], [[1, 1], [0, 1]], [[2, 1], [1, 1]]]
    out = []
    while len(out) < count:
        G = sympy.eye(4)
        for _ in range(rng.choice([1, 2, 2, 3])):
            G = transvection([rng.choice([-1, 0, 0, 1]) for _ in range(4)], rng.choice([-2, -1, 1, 2])) * G
        assert G.T * J * G == J
        if max(abs(x) for x in G) > 6:
            continue
        out.append(([[int(G[i, j]) for j in range(4)] for i in range(4)], rng.choice(sites)))
    return out


GATES = random_gates(2026, 10)


def sweep_text(i, G, g, L, boundary):
    t = f'[[sweep]]\nname = "g{i}_{boundary}"\nsites = {L}\nboundary = "{boundary}"\n'
    t += f'[sweep.bond]\nkind = "symplectic"\nmatrix = {G}\n'
    if g is not None:
        t += f"[sweep.site]\nmatrix = {g}\n"
    return t


@pytest.fixture(scope="module")
def random_run(tmp_path_factory, run_toral):
    tmp = tmp_path_factory.mktemp("random")
    cases, text = [], ""
    for i, (G, g) in enumerate(GATES):
        for L, b in ((6, "periodic"), (5, "open")):
            cases.append((G, g, L, b))
            text += sweep_text(i, G, g, L, b)
    text += "[spectrum]\nkeep_all = 100\n"
    cfg = write(tmp, text)
    out = tmp / "r.h5"
    run_toral("run", cfg, "-o", out, "-q", check=True)
    with h5py.File(out) as f:
        data = {k: f[k][()] for k in ("points/status", "points/method", "chaos/exponents", "chaos/exponent_error",
                                      "chaos/exponent_count", "chaos/zero_count", "chaos/zero_certified",
                                      "chaos/unstable_count", "chaos/ks_rate", "limit/ks_density",
                                      "limit/accuracy")}
    return cases, data


def test_random_gates_exponents_within_their_error(random_run):
    # Elliptic, parabolic and hyperbolic gates, kicks, rings (bloch) and open
    # chains (dense): every exponent lies within its reported error of the
    # mpmath value, and the exact zero count equals sympy's.
    cases, d = random_run
    assert (d["points/status"] == 0).all()
    with_zeros = 0
    for i, (G, g, L, b) in enumerate(cases):
        S = assemble(L, b, G, g)
        ref = np.array([float(v) for v in exponents_mpmath(S)])
        n = d["chaos/exponent_count"][i]
        ours, err = d["chaos/exponents"][i][:n], d["chaos/exponent_error"][i][:n]
        assert n == 2 * L
        dev = np.abs(ours - ref)
        assert (dev <= err + 1e-12).all(), (i, G, g, b, dev - err)
        zeros = exact_zero_count(S)
        assert d["chaos/zero_certified"][i] == 1
        assert d["chaos/zero_count"][i] == zeros, (i, G, g, b)
        assert (ours == 0.0).sum() == zeros
        assert d["chaos/unstable_count"][i] == (2 * L - zeros) // 2
        assert d["chaos/ks_rate"][i] == pytest.approx(ref[ref > 1e-9].sum(), abs=1e-12 + err.sum())
        with_zeros += zeros > 0
    assert 0 < with_zeros < len(cases)  # both kinds were drawn


def test_random_gates_bulk_limit_within_its_accuracy(random_run):
    cases, d = random_run
    checked = 0
    for i, (G, g, L, b) in enumerate(cases):
        if b != "periodic" or checked >= 5:
            continue
        ref = bulk_ks_density(G, g)
        assert abs(d["limit/ks_density"][i] - ref) <= d["limit/accuracy"][i] + 1e-14, (G, g)
        checked += 1
    assert checked == 5

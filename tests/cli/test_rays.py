"""Exact velocity-dependent Lyapunov exponents ([rays] -> /rays).

References, independent of the Bloch-symbol code (kernels/rays.cpp):
* direct exact propagation of a unit perturbation with Python integers,
  using the period matrix S that `toral point --matrix` exports (Matrix
  Market), at T = 40, 80, 160; the finite-time ray rate behaves like
  lambda(v) + (a ln T + b) / T (the t^(-1/2) prefactor of the saddle point
  and the O(1) amplitude, common practice), so three times determine lambda(v)
  per ray, which must agree with /rays to 1e-2;
* toral's own exact spreading (/spreading, itself checked against Python
  integers in test_spreading.py) at T = 2000 for three gates -- the cat map
  ring, a general symplectic (4x4) gate, and the unipotent open chain of
  shear2(a = 0, b = 4) -- within 1e-2 of /rays, the gap shrinking like ln T / T
  from T = 200;
* Legendre duality: max_v lambda(v) = Lambda(0) = the bulk lambda_max (common
  practice), compared with toral's bulk limit (an independent quadrature of
  the Bloch bands, itself checked against dense spectra).
"""
import json
import math

import h5py
import numpy as np
import pytest
import scipy.io

GENERAL = "[[2, 1, 1, 1], [1, 1, 0, 0], [1, 1, 2, 1], [0, 0, 1, 1]]"


def floats(x):
    """A JSON array of `toral point --json` as floats (JSON has no infinities: null -> NaN)."""
    return np.array([math.nan if a is None else float(a) for a in x])


def sweep(name, L, boundary, bond):
    return f'[[sweep]]\nname = "{name}"\nsites = {L}\nboundary = "{boundary}"\n[sweep.bond]\n{bond}\n'


CAT = 'matrix = [[2, 1], [1, 1]]'
GEN = f'kind = "symplectic"\nmatrix = {GENERAL}'
SHEAR = 'kind = "position"\nfamily = "shear2"\na = 0\nb = 4'
FAST_SPECTRUM = '[spectrum]\nmethod = "tangent"\n[spectrum.tangent]\ncount = 1\nperiods = 4\nwindows = 2\ntransient = 0\n'


def python_rates(mtx, L, start, times):
    """ln max(|q_i|, |p_i|) / t of S^t e_q(start) at the given times, Python integers."""
    S = scipy.io.mmread(str(mtx)).tocsr()
    rows = [[(int(S.indices[k]), int(round(S.data[k]))) for k in range(S.indptr[i], S.indptr[i + 1])]
            for i in range(S.shape[0])]
    x = [0] * (2 * L)
    x[start] = 1
    out = {}
    for t in range(1, max(times) + 1):
        x = [sum(v * x[j] for j, v in row) for row in rows]
        if t in times:
            amp = [max(abs(x[i]), abs(x[L + i])) for i in range(L)]
            out[t] = [math.log(a) / t if a else -math.inf for a in amp]
    return out


@pytest.mark.parametrize("name,bond", [("cat", CAT), ("general", GEN)])
def test_lambda_v_against_python_integer_propagation(tmp_path, run_toral, name, bond):
    T3 = (40, 80, 160)
    L = 4 * T3[-1] + 8
    cfg = tmp_path / "r.toml"
    cfg.write_text(sweep(name, L, "periodic", bond) + "[rays]\nvelocities = 9\n" + FAST_SPECTRUM)
    rec = json.loads(run_toral("point", cfg, "--index", 0, "--json", check=True).stdout)
    v = np.linspace(-2, 2, 9)
    lam = floats(rec["/rays/lyapunov"])
    err = floats(rec["/rays/lyapunov_error"])
    assert (err < 1e-7).all()
    mtx = tmp_path / "s.mtx"
    run_toral("point", cfg, "--index", 0, "--matrix", mtx, check=True)
    start = L // 2
    rates = python_rates(mtx, L, start, set(T3))
    checked = 0
    for k, vel in enumerate(v):
        if abs(vel) > 1.75:  # the cone's edges: no saddle point, the fit's form does not apply
            continue
        r = [rates[T][round(start + vel * T)] for T in T3]
        # r_T = lam + (a ln T + b) / T: solve the 3x3 system for lam
        A = np.array([[1.0, math.log(T) / T, 1.0 / T] for T in T3])
        fit = np.linalg.solve(A, np.array(r))[0]
        assert fit == pytest.approx(lam[k], abs=1e-2), (name, vel, fit, lam[k], r)
        checked += 1
    assert checked == 7
    # duality: the peak is the bulk lambda_max
    assert rec["/rays/peak"] == pytest.approx(rec["/limit/lambda_max"], abs=1e-9)
    assert max(lam) <= rec["/rays/peak"] + 1e-9


def test_three_gates_at_T2000(tmp_path, run_toral):
    L = 8200
    text = (sweep("cat", L, "periodic", CAT) + sweep("general", L, "periodic", GEN) +
            sweep("shear", L, "open", SHEAR) + FAST_SPECTRUM + "[rays]\n")
    gaps = {}
    for T in (200, 2000):
        cfg = tmp_path / f"t{T}.toml"
        cfg.write_text(text + f"[spreading]\nperiods = {T}\nstride = {T}\n")
        out = tmp_path / f"t{T}.h5"
        run_toral("run", cfg, "-o", out, "-q", check=True)
        with h5py.File(out, "r") as f:
            assert (f["points/status"][()] == 0).all()
            assert (f["spreading/velocity"][()] == f["rays/v"][()]).all()
            meas = f["spreading/ray_rate"][()]
            exact = f["rays/lyapunov"][()]
            for i in range(3):
                inside = np.isfinite(exact[i]) & np.isfinite(meas[i])
                assert inside.sum() >= 20
                gaps[(T, i)] = np.abs(meas[i][inside] - exact[i][inside]).max()
                # outside the exact light cone the integers are exactly zero
                assert (np.isneginf(meas[i][np.isneginf(exact[i])])).all()
    print("max |ray_rate - lambda(v)| per (T, gate):", gaps)
    for i in range(3):
        assert gaps[(2000, i)] < 1e-2, (i, gaps)
        # the finite-time gap shrinks like ln T / T: (ln 200/200) / (ln 2000/2000) = 6.97
        ratio = gaps[(200, i)] / gaps[(2000, i)]
        assert 3 < ratio < 15, (i, gaps, ratio)


def test_unipotent_open_chain(tmp_path, run_toral):
    # Every eigenvalue exponent of the open chain is 0 (M triangular with unit
    # diagonal), the absolute rate lambda(0) is 0, while rays grow at up to the
    # bulk lambda_max, one way only (the position block is triangular).
    cfg = tmp_path / "u.toml"
    cfg.write_text(sweep("shear", 32, "open", SHEAR) + "[rays]\n")
    rec = json.loads(run_toral("point", cfg, "--index", 0, "--json", check=True).stdout)
    assert rec["/chaos/lambda_max"] == 0 and rec["/chaos/zero_certified"] == 1
    assert rec["/rays/absolute"] == pytest.approx(0, abs=1e-9)
    assert rec["/rays/peak"] == pytest.approx(rec["/limit/lambda_max"], abs=1e-9)
    assert rec["/rays/cone_left"] == 0 and rec["/rays/cone_right"] == 2
    assert rec["/rays/butterfly_left"] == pytest.approx(0, abs=1e-6) and rec["/rays/butterfly_right"] == 2
    lam = floats(rec["/rays/lyapunov"])
    assert np.isnan(lam[:20]).all() and np.isfinite(lam[20:]).all()  # -inf: null in JSON
    # p perturbations travel the other way: lambda_p(v) = lambda_q(-v)
    cfg.write_text(sweep("shear", 32, "open", SHEAR) + '[rays]\ncomponent = "p"\n')
    recp = json.loads(run_toral("point", cfg, "--index", 0, "--json", check=True).stdout)
    np.testing.assert_allclose(floats(recp["/rays/lyapunov"]), lam[::-1], atol=1e-9)


def test_butterfly_zero_and_padding(tmp_path, run_toral):
    # A gate with lambda(v) < 0 near the cone's edges: lambda(v_B) = 0 there.
    # shear2(a = 1, b = 1) is the cat map on bonds; use a kicked ring with a
    # weaker coupling.
    cfg = tmp_path / "b.toml"
    cfg.write_text(sweep("weak", 16, "periodic", 'kind = "position"\nmatrix = [[1, 1], [0, 1]]') +
                   '[sweep.site]\nmatrix = [[2, 1], [1, 1]]\n' +
                   sweep("dis", 16, "periodic", 'family = "shear2"\na = { draw = [-2, 2] }\nb = { draw = [-2, 2] }').replace(
                       "boundary", "seeds = 1\nboundary") +
                   "[rays]\nvelocities = 401\n")
    out = tmp_path / "b.h5"
    run_toral("run", cfg, "-o", out, "-q", check=True)
    with h5py.File(out, "r") as f:
        v = f["rays/v"][()]
        lam = f["rays/lyapunov"][0]
        bl, br = f["rays/butterfly_left"][0], f["rays/butterfly_right"][0]
        assert -2 <= bl < 0 < br <= 2
        fin = np.isfinite(lam)
        for vb in (bl, br):
            if abs(vb) < 2:  # an interior zero: lambda changes sign there on the fine grid
                assert np.interp(vb, v[fin], lam[fin]) == pytest.approx(0, abs=2e-3)
        # concave: second differences <= 0 (to rounding)
        d2 = np.diff(lam[fin], 2)
        assert (d2 <= 1e-9).all()
        # the disordered point has no symbol: padding
        assert np.isnan(f["rays/lyapunov"][1]).all() and np.isnan(f["rays/peak"][1])


def test_bad_values(tmp_path, run_toral):
    for body, key in (("velocities = 1", "rays.velocities"), ('component = "x"', "rays.component"),
                      ("speed = 2", "rays.speed")):
        cfg = tmp_path / "bad.toml"
        cfg.write_text(sweep("cat", 8, "periodic", CAT) + "[rays]\n" + body + "\n")
        r = run_toral("check", cfg)
        assert r.returncode == 2
        err = r.stderr.strip().splitlines()
        assert len(err) == 1 and "bad.toml:" in err[0] and key in err[0], err


def test_open_chain_eigenvalues_tend_to_the_absolute_rate(tmp_path, run_toral):
    # An asymmetric general gate: its peak sits at v != 0, so lambda(0) <
    # max_v lambda(v). The largest eigenvalue exponent of a long open chain
    # tends to lambda(0), not to the bulk lambda_max (for banded Toeplitz
    # matrices the finite sections' spectral radius tends to min over r of
    # max_{|z| = r} |symbol|, Schmidt & Spitzer, Math. Scand. 8 (1960) 15; here
    # measured with toral's dense LAPACK spectrum, from memory for the theorem).
    gate = 'kind = "symplectic"\nmatrix = [[0, 3, 2, 0], [-1, 3, 2, -1], [0, 1, 1, 0], [2, 0, 0, 3]]'
    gaps = []
    for L in (64, 256):
        cfg = tmp_path / f"o{L}.toml"
        cfg.write_text(sweep("asym", L, "open", gate) + "[rays]\n")
        rec = json.loads(run_toral("point", cfg, "--index", 0, "--json", check=True).stdout)
        lam0, peak = rec["/rays/absolute"], rec["/rays/peak"]
        assert peak - lam0 > 0.02 and abs(rec["/rays/peak_velocity"]) > 0.1
        eig = rec["/chaos/lambda_max"]
        assert abs(eig - lam0) < abs(eig - peak)
        gaps.append(abs(eig - lam0))
    assert gaps[1] < gaps[0] / 4 and gaps[1] < 1e-3, gaps


def test_unipotent_open_chain_regions_grow_at_the_ring_rate(tmp_path, run_toral):
    # The open chain's eigenvalue exponents are all 0, yet the exact Gaussian
    # entropy of bulk blocks, while the backward light cone (2 sites per
    # period each way) stays inside the chain, grows exactly as on the ring of
    # the same gates (the rows of S^t for the region are the same integers),
    # i.e. at the ring's rate (within 2 %, the requirement; here equal).
    slopes = {}
    for b in ("open", "periodic"):
        cfg = tmp_path / f"{b}.toml"
        cfg.write_text(sweep("shear", 128, b, SHEAR) + '[spectrum]\nmethod = "dense"\n'
                       "[entanglement]\nperiods = 24\nregions = [4, 8]\noffset = 60\n")
        rec = json.loads(run_toral("point", cfg, "--index", 0, "--json", check=True).stdout)
        slopes[b] = np.array(rec["/entanglement/gaussian/slope"])
        if b == "open":
            assert rec["/chaos/lambda_max"] == 0 and rec["/chaos/zero_certified"] == 1
            # the eigenvalue ratio is inf; the transient one is finite (docs/rays.md)
            assert rec["/entanglement/gaussian/slope_over_lyapunov"] == [None, None]  # +inf: null in JSON
            transient = np.array(rec["/entanglement/transient_rate"])
            over_transient = np.array(rec["/entanglement/gaussian/slope_over_transient"])
            assert rec["/entanglement/transient_window"] == [30, 30]  # min(60, 128 - 1 - 67) // 2
        else:
            assert rec["/chaos/lambda_max"] == pytest.approx(rec["/limit/lambda_max"], abs=1e-9)
            ring_rate = np.array(rec["/entanglement/lyapunov_rate"])
            ring_over = np.array(rec["/entanglement/gaussian/slope_over_lyapunov"])
            assert rec["/entanglement/transient_rate"] == [None, None]  # NaN on rings
    assert (slopes["open"] > 20).all()
    np.testing.assert_allclose(slopes["open"], slopes["periodic"], rtol=0.02)
    # the transient rate is the ring's Lambda_|A|, so the open chain's ratio is the ring's
    np.testing.assert_allclose(transient, ring_rate, rtol=1e-12)
    np.testing.assert_allclose(over_transient, ring_over, rtol=1e-9)
    assert (over_transient > 0.95).all() and (over_transient <= 1.0).all()

"""Exact spreading of a localised perturbation ([spreading] -> /spreading).

References: the period matrix S of each point exported by `toral point
--matrix` (Matrix Market, checked against numpy elsewhere) is applied T times
to the unit vector with Python's arbitrary-precision integers, and the
amplitudes ln max(|q_i|, |p_i|) and ray rates are recomputed here with
math.log; for a clean ring the largest ray rate tends to the Bloch lambda_max
(the top of the velocity-dependent exponent is the largest Lyapunov exponent,
Deissler & Kaneko, Phys. Lett. A 119 (1987) 397) with a finite-time gap of
order ln T / T (the t^(-1/2) prefactor of the saddle point, common practice).
"""
import json
import math

import h5py
import numpy as np
import pytest
import scipy.io

CONFIG = """
[[sweep]]
name = "cat"
sites = [32, 24]
boundary = ["periodic", "open"]
[sweep.bond]
matrix = [[2, 1], [1, 1]]

[[sweep]]
name = "kicked"
sites = 20
boundary = "open"
[sweep.bond]
matrix = [[1, 1], [0, 1]]
[sweep.site]
matrix = [[2, 1], [1, 1]]

[[sweep]]
name = "disordered"
sites = 26
boundary = "open"
seeds = 3
[sweep.bond]
family = "shear2"
a = { draw = [-2, 2] }
b = { draw = [-2, 2] }

[spreading]
periods = 40
stride = 8
component = "p"
"""


def propagate(mtx, L, start, momentum, T, stride):
    """Rows of ln max(|q_i|, |p_i|) of S^t e at t = 0, stride, ..., T (Python ints)."""
    S = scipy.io.mmread(str(mtx)).tocsr()
    rows = []
    for i in range(S.shape[0]):
        lo, hi = S.indptr[i], S.indptr[i + 1]
        rows.append([(int(S.indices[k]), int(round(S.data[k]))) for k in range(lo, hi)])
    x = [0] * (2 * L)
    x[(L if momentum else 0) + start] = 1
    out = []

    def keep():
        out.append([math.log(max(abs(x[i]), abs(x[L + i]))) if max(abs(x[i]), abs(x[L + i])) else -math.inf
                    for i in range(L)])
    keep()
    for t in range(1, T + 1):
        x = [sum(v * x[j] for j, v in row) for row in rows]
        if t % stride == 0 or t == T:
            keep()
    return np.array(out)


def test_profiles_equal_python_integers(tmp_path, run_toral):
    cfg = tmp_path / "s.toml"
    cfg.write_text(CONFIG)
    out = tmp_path / "s.h5"
    run_toral("run", cfg, "-o", out, "-q", check=True)
    with h5py.File(out, "r") as f:
        P = f["points/status"].shape[0]
        assert P == 2 * 2 + 1 + 1
        assert (f["points/status"][()] == 0).all()
        t = f["spreading/t"][()]
        assert t.tolist() == [0, 8, 16, 24, 32, 40]
        v = f["spreading/velocity"][()]
        for i in range(P):
            L = int(f["points/sites"][i])
            start = int(f["spreading/start"][i])
            assert start == L // 2
            mtx = tmp_path / f"s{i}.mtx"
            run_toral("point", cfg, "--index", i, "--matrix", mtx, check=True)
            ref = propagate(mtx, L, start, True, 40, 8)
            got = f["spreading/log_amplitude"][i]
            assert np.isnan(got[:, L:]).all()
            np.testing.assert_array_equal(np.isneginf(got[:, :L]), np.isneginf(ref), err_msg=f"point {i}")
            fin = np.isfinite(ref)
            np.testing.assert_allclose(got[:, :L][fin], ref[fin], rtol=1e-14, atol=1e-13, err_msg=f"point {i}")
            # ray rates from the last row, recomputed
            rr = f["spreading/ray_rate"][i]
            for k, vel in enumerate(v):
                x = round(start + vel * 40)
                if 0 <= x < L:
                    want = ref[-1][x] / 40
                    assert rr[k] == pytest.approx(want, rel=1e-13) or (math.isinf(want) and rr[k] == want)
                else:
                    assert np.isnan(rr[k])
            fin_rr = rr[~np.isnan(rr)]
            assert f["spreading/max_ray_rate"][i] == fin_rr.max()
            support = np.nonzero(~np.isneginf(ref[-1]))[0]
            assert f["spreading/front_left"][i] == pytest.approx((support[0] - start) / 40, abs=1e-15)
            assert f["spreading/front_right"][i] == pytest.approx((support[-1] - start) / 40, abs=1e-15)
            # inside the brick-wall light cone: two sites per period
            assert f["spreading/front_right"][i] <= 2 and f["spreading/front_left"][i] >= -2


def test_clean_ring_top_ray_rate_tends_to_lambda_max(tmp_path, run_toral):
    # A ring wide enough that the light cone (2 sites per period) never wraps:
    # the gap lambda_max - max_v ray rate is of order ln T / T and shrinks.
    gaps = []
    for T in (50, 200):
        cfg = tmp_path / f"r{T}.toml"
        cfg.write_text('[[sweep]]\nname = "cat"\nsites = 1024\n[sweep.bond]\nmatrix = [[2, 1], [1, 1]]\n'
                       f'[spreading]\nperiods = {T}\nvelocities = 401\n')
        rec = json.loads(run_toral("point", cfg, "--index", 0, "--json", check=True).stdout)
        lam = rec["/chaos/lambda_max"]
        assert rec["/chaos/zero_certified"] == 1 and lam > 1  # the exact Bloch spectrum of the ring
        top = rec["/spreading/max_ray_rate"]
        gap = lam - top
        assert abs(gap) <= 2 * math.log(T) / T, (T, lam, top)
        gaps.append(abs(gap))
        assert rec["/spreading/max_bits"] > 0.9 * lam * T / math.log(2)
    assert gaps[1] < gaps[0]


def test_bad_keys_are_located(tmp_path, run_toral):
    base = '[[sweep]]\nname = "a"\nsites = 8\n[sweep.bond]\nmatrix = [[2, 1], [1, 1]]\n[spreading]\n'
    for body, where, what in [("periods = 0\n", "s.toml:7", "spreading.periods"),
                              ("periods = 4\nsite = 8\n", "s.toml:8", "beyond every lattice"),
                              ("periods = 4\ncomponent = \"x\"\n", "s.toml:8", "spreading.component"),
                              ("periods = 4\nstride = 5\n", "s.toml:8", "spreading.stride"),
                              ("site = 1\n", "s.toml:6", "missing 'periods'")]:
        cfg = tmp_path / "s.toml"
        cfg.write_text(base + body)
        p = run_toral("run", cfg, "-o", tmp_path / "bad.h5")
        assert p.returncode == 2, p.stderr
        lines = p.stderr.strip().splitlines()
        assert len(lines) == 1 and where in lines[0] and what in lines[0], p.stderr
        assert not (tmp_path / "bad.h5").exists()

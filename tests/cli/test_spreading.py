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


# shear2 gates with a, b != 0 couple both ways, so most rays are finite.
STARTS_CONFIG = """
[[sweep]]
name = "dis_open"
sites = 26
boundary = "open"
seeds = [1, 2]
[sweep.bond]
family = "shear2"
a = { draw = [-2, -1] }
b = { draw = [1, 2] }

[[sweep]]
name = "dis_ring"
sites = 20
seeds = [1, 2]
[sweep.bond]
family = "shear2"
a = { draw = [-2, -1] }
b = { draw = [1, 2] }

[spreading]
periods = 6
velocities = 25
starts = 3
"""


def comb(first, L, open_chain, T, n):
    """The documented start rule (docs/config.md, [spreading] starts)."""
    m = min(2 * T, (L - n) // 2) if open_chain else 0
    W = L - 2 * m
    return [first] + [m + ((first - m) % W + (2 * k * W + n) // (2 * n)) % W for k in range(1, n)]


def test_start_average_equals_numpy_over_python_propagations(tmp_path, run_toral):
    # Three starts on small disordered chains, open and periodic. Each start
    # is propagated here with Python integers (the exported S); the ray rates
    # ln a_T(s + vT)/T are averaged with numpy: mean, and std(ddof=1)/sqrt(n)
    # for the standard error (reference library).
    T, n = 6, 3
    cfg = tmp_path / "st.toml"
    cfg.write_text(STARTS_CONFIG)
    out = tmp_path / "st.h5"
    run_toral("run", cfg, "-o", out, "-q", check=True)
    with h5py.File(out, "r") as f:
        P = f["points/status"].shape[0]
        assert P == 4 and (f["points/status"][()] == 0).all()
        assert f["spreading/start_index"][()].tolist() == [0, 1, 2]
        v = f["spreading/velocity"][()]
        partial = 0
        for i in range(P):
            L = int(f["points/sites"][i])
            open_chain = int(f["points/boundary"][i]) == 1
            starts = f["spreading/starts"][i].tolist()
            assert starts == comb(L // 2, L, open_chain, T, n) and len(set(starts)) == n
            assert starts[0] == f["spreading/start"][i]
            if open_chain:  # away from the ends where the chain allows it
                m = min(2 * T, (L - n) // 2)
                assert all(m <= s <= L - 1 - m for s in starts)
            mtx = tmp_path / f"st{i}.mtx"
            run_toral("point", cfg, "--index", i, "--matrix", mtx, check=True)
            last = [propagate(mtx, L, s, False, T, T)[-1] for s in starts]
            rates = np.full((n, len(v)), np.nan)
            for k, s in enumerate(starts):
                for j, vel in enumerate(v):
                    x0 = math.floor(starts[0] + vel * T + 0.5)  # the first start's ray
                    if open_chain:
                        x = math.floor(s + vel * T + 0.5)
                        if 0 <= x < L:
                            rates[k, j] = last[k][x] / T
                    elif 0 <= x0 < L:  # a ring: the first start's offsets, modulo L
                        rates[k, j] = last[k][(s + x0 - starts[0]) % L] / T
            # the first start is the ray_rate of the single-start fields
            np.testing.assert_array_equal(np.isnan(rates[0]), np.isnan(f["spreading/ray_rate"][i]))
            fin = ~np.isnan(rates[0])
            np.testing.assert_allclose(f["spreading/ray_rate"][i][fin], rates[0][fin], rtol=1e-13, atol=1e-15)
            count = (~np.isnan(rates)).sum(axis=0)
            np.testing.assert_array_equal(f["spreading/ray_count"][i], count, err_msg=f"point {i}")
            partial += int((count < n).any() and (count > 0).any())
            mean, se = f["spreading/ray_rate_mean"][i], f["spreading/ray_rate_se"][i]
            for j in range(len(v)):
                r = rates[:, j][~np.isnan(rates[:, j])]
                if len(r) == 0:
                    assert np.isnan(mean[j]) and np.isnan(se[j])
                    continue
                with np.errstate(invalid="ignore"):
                    want_m, want_se = np.mean(r), (np.std(r, ddof=1) / np.sqrt(len(r)) if len(r) > 1 else np.nan)
                if np.isinf(want_m):
                    assert mean[j] == want_m and np.isnan(se[j])
                else:
                    assert mean[j] == pytest.approx(want_m, rel=1e-12, abs=1e-14), (i, j)
                    if len(r) > 1:
                        assert se[j] == pytest.approx(want_se, rel=1e-9, abs=1e-14), (i, j)
                    else:
                        assert np.isnan(se[j])
            tops = np.array([np.nanmax(r) for r in rates])
            assert f["spreading/max_ray_rate_mean"][i] == pytest.approx(np.mean(tops), rel=1e-12)
            assert f["spreading/max_ray_rate_se"][i] == pytest.approx(np.std(tops, ddof=1) / np.sqrt(n), rel=1e-9)
        assert partial >= 1  # some open-chain rays left the chain for some starts only
        # the ensemble column over the seeds (numpy mean, reference library)
        st = f["stats/spreading_max_ray_rate_mean"]
        tops = f["spreading/max_ray_rate_mean"][()]
        sw = f["points/sweep"][()]
        assert st["mean"].shape == (2,) and f["stats/count"][()].tolist() == [2, 2]
        np.testing.assert_allclose(st["mean"][()], [tops[sw == g].mean() for g in (0, 1)], rtol=1e-14)


def test_bad_keys_are_located(tmp_path, run_toral):
    base = '[[sweep]]\nname = "a"\nsites = 8\n[sweep.bond]\nmatrix = [[2, 1], [1, 1]]\n[spreading]\n'
    for body, where, what in [("periods = 0\n", "s.toml:7", "spreading.periods"),
                              ("periods = 4\nsite = 8\n", "s.toml:8", "beyond every lattice"),
                              ("periods = 4\ncomponent = \"x\"\n", "s.toml:8", "spreading.component"),
                              ("periods = 4\nstride = 5\n", "s.toml:8", "spreading.stride"),
                              ("periods = 4\nstarts = 0\n", "s.toml:8", "spreading.starts"),
                              ("periods = 4\nstarts = 9\n", "s.toml:8", "spreading.starts"),
                              ("periods = 4\nstarts = \"all\"\n", "s.toml:8", "spreading.starts"),
                              ("site = 1\n", "s.toml:6", "missing 'periods'")]:
        cfg = tmp_path / "s.toml"
        cfg.write_text(base + body)
        p = run_toral("run", cfg, "-o", tmp_path / "bad.h5")
        assert p.returncode == 2, p.stderr
        lines = p.stderr.strip().splitlines()
        assert len(lines) == 1 and where in lines[0] and what in lines[0], p.stderr
        assert not (tmp_path / "bad.h5").exists()

"""Top Lyapunov vectors of the QR method ([vectors] -> /vectors).

References, named beside each check: a numpy QR (Benettin) iteration on the
period matrix S exported by `toral point --matrix` (Matrix Market; numpy.linalg.qr
is the reference library; Benettin, Galgani, Giorgilli & Strelcyn, Meccanica 15
(1980) 9, for the method); the Bloch bulk rate lambda_max printed by `toral
point` (/limit/lambda_max) for the unipotent open chain, whose eigenvalue
exponents are all 0 (physics notes, "Open chains are non-normal"); the
localisation measures recomputed from the stored weights with the definitions
of kernels/localisation.hpp (Pikovsky & Politi, "Lyapunov Exponents", 2016,
for the participation number of a Lyapunov vector).
"""
import json
import math

import h5py
import numpy as np
import pytest
import scipy.io

from test_cli import datasets

DISORDERED = """
[[sweep]]
name = "disordered"
sites = 12
boundary = ["periodic", "open"]
seeds = [4]  # one-site cat kicks make S general: one cocycle, distinct top moduli
[sweep.bond]
family = "shear2"
a = { draw = [-2, 2] }
b = { draw = [-2, 2] }
[sweep.site]
family = "cat"
a = { draw = [0, 3] }
b = 1

[vectors]
count = 4
window = 20
transient = 800
windows = 3
"""


def period_matrix(run_toral, cfg, index, path):
    """S of point `index` as a float array (toral order q_0..q_{L-1}, p_0..p_{L-1})."""
    run_toral("point", cfg, "--index", index, "--matrix", path, check=True)
    return scipy.io.mmread(str(path)).toarray().astype(float)


def qr_reference(S, k, transient, window, seed=0):
    """numpy QR (Benettin) iteration: finite-time exponents over the last
    `window` periods and the final orthonormal vectors."""
    rng = np.random.default_rng(seed)
    Q = np.linalg.qr(rng.uniform(-1, 1, (S.shape[0], k)))[0]
    logs = np.zeros(k)
    for t in range(transient + window):
        Q, R = np.linalg.qr(S @ Q)
        if t >= transient:
            logs += np.log(np.abs(np.diag(R)))
    return logs / window, Q


def weights(v, L):
    w = v[:L] ** 2 + v[L:] ** 2
    return w / w.sum()


def xi_fit(w, ring, floor=1e-24):
    """Least-squares localisation length of kernels/localisation.hpp, recomputed."""
    L = len(w)
    peak = int(np.argmax(w))
    d = np.abs(np.arange(L) - peak)
    if ring:
        d = np.minimum(d, L - d)
    keep = w >= floor
    if keep.sum() < 3 or len(set(d[keep])) < 2:
        return math.nan  # too few sites above the floor for a fit
    s = np.polyfit(d[keep], np.log(w[keep]), 1)[0]
    return math.inf if s >= 0 else -2 / s


def test_exponents_and_iprs_equal_numpy_qr(tmp_path, run_toral):
    cfg = tmp_path / "d.toml"
    cfg.write_text(DISORDERED)
    out = tmp_path / "d.h5"
    run_toral("run", cfg, "-o", out, "-q", check=True)
    with h5py.File(out, "r") as f:
        assert (f["points/status"][()] == 0).all()
        assert "window_rule" in f["vectors"].attrs
        for i in range(f["points/status"].shape[0]):
            L = int(f["points/sites"][i])
            ring = int(f["points/boundary"][i]) == 0
            S = period_matrix(run_toral, cfg, i, tmp_path / f"d{i}.mtx")
            # Precondition for a comparison vector by vector: the top 5 moduli
            # of S are distinct (numpy.linalg.eigvals), so the frame converges
            # to the same vectors from any start within the transient.
            mod = np.sort(np.log(np.abs(np.linalg.eigvals(S))))[::-1][:5]
            assert np.all(-np.diff(mod) > 0.04), mod  # gap * transient > 35: converged to rounding
            lam, Q = qr_reference(S, 4, 800, 20)
            assert f["vectors/window"][i] == 20 and f["vectors/transient"][i] == 800
            np.testing.assert_allclose(f["vectors/exponent"][i], lam, rtol=1e-9, atol=1e-12, err_msg=f"point {i}")
            # the frozen windows agree with each other: no scatter, no drift
            assert np.all(f["vectors/exponent_error"][i] < 1e-9)
            ipr = [np.sum(weights(Q[:, j], L) ** 2) for j in range(4)]
            np.testing.assert_allclose(f["vectors/ipr"][i], ipr, rtol=1e-9, err_msg=f"point {i}")
            np.testing.assert_allclose(f["vectors/participation"][i], 1 / np.array(ipr), rtol=1e-9)
            for j in range(4):
                w = weights(Q[:, j], L)
                np.testing.assert_allclose(f["vectors/weight"][i, j, :L], w, rtol=1e-8, atol=1e-15)
                assert f["vectors/peak_site"][i, j] == np.argmax(w)
                assert f["vectors/localisation_length"][i, j] == pytest.approx(xi_fit(w, ring), rel=1e-8, nan_ok=True)
            # a one-site layer: one cocycle, the vectors of S itself
            assert (f["vectors/block"][i] == 0).all()


UNIPOTENT = """
[[sweep]]
name = "unipotent"
sites = [32, 256]
boundary = "open"
[sweep.bond]
family = "shear2"
a = 0
b = 4

[vectors]
count = 2
"""


def test_unipotent_open_chain_grows_at_the_bulk_rate_over_the_default_window(tmp_path, run_toral):
    # Physics notes, "Open chains are non-normal": M is unipotent, so every
    # eigenvalue exponent is 0 (certified exactly at L = 32), yet a
    # perturbation grows at the bulk (Bloch) rate while it travels; over the
    # default window, which ends before it reaches a boundary, the QR
    # exponent is that rate within its stated error. Measured: 2.864 +- 0.030
    # against 2.887.
    cfg = tmp_path / "u.toml"
    cfg.write_text(UNIPOTENT)
    small = json.loads(run_toral("point", cfg, "--index", 0, "--json", check=True).stdout)
    assert small["/chaos/lambda_max"] == 0.0 and small["/chaos/zero_certified"] != 0
    rec = json.loads(run_toral("point", cfg, "--index", 1, "--json", check=True).stdout)
    bulk = rec["/limit/lambda_max"]
    assert bulk == pytest.approx(2.887, abs=5e-4)  # the Bloch value of the issue
    assert rec["/chaos/lambda_max"] == 0.0
    assert rec["/vectors/window"] == 64 and rec["/vectors/transient"] == 0  # 2 * 2 * 64 = 256
    lam, err = rec["/vectors/exponent"][0], rec["/vectors/exponent_error"][0]
    assert abs(lam - bulk) <= err, (lam, err, bulk)
    assert err < 0.05  # and the error is not vacuous
    # the weights of the L = 32 point are NaN beyond its lattice in a run file
    out = tmp_path / "u.h5"
    run_toral("run", cfg, "-o", out, "-q", check=True)
    with h5py.File(out, "r") as f:
        w = f["vectors/weight"][()]
        assert np.isnan(w[0, :, 32:]).all() and np.isfinite(w[0, :, :32]).all()
        assert np.allclose(w[1].sum(axis=1), 1.0)
        assert f["vectors/window"][0] == 8


LOCALISATION = """
[[sweep]]
name = "clean"
sites = 256
[sweep.bond]
family = "shear2"
a = 1
b = 1

[[sweep]]
name = "disordered"
sites = 256
boundary = "open"
seeds = [1]
[sweep.bond]
family = "shear2"
a = { draw = [-3, 3] }
b = { draw = [-3, 3] }

[vectors]
count = 2
"""


def test_clean_ring_vector_is_extended_disordered_chain_vector_is_localised(tmp_path, run_toral):
    # Measured on this machine: participation number of the top vector
    # 103 of L = 256 sites on the clean ring (a Bloch-wave packet: extended),
    # 2.7 sites on the strongly disordered open chain (localised). The bounds
    # L/4 and 8 leave room for other seeds of the initial vectors.
    cfg = tmp_path / "l.toml"
    cfg.write_text(LOCALISATION)
    clean = json.loads(run_toral("point", cfg, "--index", 0, "--json", check=True).stdout)
    dis = json.loads(run_toral("point", cfg, "--index", 1, "--json", check=True).stdout)
    assert clean["/vectors/participation"][0] > 256 / 4
    assert dis["/vectors/participation"][0] < 8
    assert dis["/vectors/ipr"][0] > 10 * clean["/vectors/ipr"][0]


SMALL_RANKS = """
[[sweep]]
name = "d"
sites = [12, 16]
boundary = ["periodic", "open"]
seeds = [1, 2]
[sweep.bond]
family = "shear2"
a = { draw = [-2, 2] }
b = { draw = [-2, 2] }

[[sweep]]
name = "kicked"
sites = 10
seeds = [5]
[sweep.bond]
matrix = [[1, 1], [0, 1]]
[sweep.site]
family = "cat"
a = { draw = [0, 3] }
b = 1

[vectors]
count = 3
windows = 3
ranks = 2
"""
TIMINGS = ("points/wall_time", "chaos/solver/wall_time")


def test_one_and_two_ranks_write_the_same_datasets(tmp_path, run_toral):
    # ranks = 2: the tangent solver runs on a rank group of 2 in the 2-rank
    # run (ranks_wanted > 1) and on 1 rank in the other. The initial vectors
    # are keyed by (seed, point, window, site), not by rank; the
    # orthonormalisation's reductions sum in a partition-dependent order, so
    # floats agree to rounding (solvers/tangent.hpp: ~1e-15 relative, 1e-9
    # allowed after 8 + 16 periods of amplification); everything else is equal.
    cfg = tmp_path / "r.toml"
    cfg.write_text(SMALL_RANKS)
    a, b = tmp_path / "a.h5", tmp_path / "b.h5"
    run_toral("run", cfg, "-o", a, "-q", ranks=1, check=True)
    run_toral("run", cfg, "-o", b, "-q", ranks=2, check=True)
    da, aa = datasets(a)
    db, ab = datasets(b)
    assert sorted(da) == sorted(db) and "vectors/weight" in da
    for name in da:
        if name in TIMINGS or name.startswith("chaos/solver"):
            continue
        x, y = np.asarray(da[name]), np.asarray(db[name])
        if (name.startswith("vectors/") or name.startswith("stats/vectors_")) and x.dtype.kind == "f":
            np.testing.assert_allclose(x, y, rtol=1e-9, atol=1e-12, equal_nan=True, err_msg=name)
        else:
            np.testing.assert_array_equal(x, y, err_msg=name)
    with h5py.File(b, "r") as f:
        assert (f["points/status"][()] == 0).all()
    assert aa.keys() == ab.keys()


def test_bad_keys_are_located(tmp_path, run_toral):
    base = '[[sweep]]\nname = "a"\nsites = 8\n[sweep.bond]\nmatrix = [[2, 1], [1, 1]]\n[vectors]\n'
    for body, where, what in [("window = 3\n", "v.toml:7", "vectors.window"),
                              ("windows = 1\n", "v.toml:7", "vectors.windows"),
                              ("count = 0\n", "v.toml:7", "vectors.count"),
                              ("transient = -1\n", "v.toml:7", "vectors.transient"),
                              ("speed = 1\n", "v.toml:7", "speed")]:
        cfg = tmp_path / "v.toml"
        cfg.write_text(base + body)
        p = run_toral("check", cfg)
        assert p.returncode == 2, body
        line = p.stderr.strip()
        assert "\n" not in line and where in line and what in line, line

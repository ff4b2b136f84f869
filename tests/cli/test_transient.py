"""The transient rates of open chains (/transient, /points/transient_differs).

References outside the code under test (driver/transient.cpp):
* numpy's dense eigenvalues of the ring of the same gates (the period matrix
  that `toral point --matrix` exports): the transient Lambda_ell is the sum
  of its 2 ell largest ln|eigenvalue| (Bianchi, Hackl & Yokomizo, JHEP 03
  (2018) 025, for the rate of a generic region);
* the issue's example, shear2(a = 0, b = 4) on an open chain of L = 32: the
  position block is triangular with unit diagonal, so every eigenvalue
  exponent is exactly 0, while the bulk lambda_max (toral's /limit, an
  independent quadrature of the Bloch bands) is 2.887;
* the duality max_v lambda(v) = Lambda(0) = the bulk lambda_max (common
  practice, docs/rays.md) against /limit/lambda_max;
* for the symmetric cat chain, lambda(0) = the peak, and the open chain's
  eigenvalue lambda_max approaches it as L grows (finite size, not
  convective); for an asymmetric general gate lambda(0) < peak (convective),
  the open chains' dense eigenvalues tending to lambda(0) (checked in
  test_rays.py).
"""
import json
import math

import h5py
import numpy as np
import pytest

from conftest import shard_and_merge

SHEAR = 'kind = "position"\nfamily = "shear2"\na = 0\nb = 4'
CAT = "matrix = [[2, 1], [1, 1]]"
ASYM = 'kind = "symplectic"\nmatrix = [[0, 3, 2, 0], [-1, 3, 2, -1], [0, 1, 1, 0], [2, 0, 0, 3]]'


def sweep(name, L, boundary, bond, extra=""):
    return f'[[sweep]]\nname = "{name}"\nsites = {L}\nboundary = {boundary}\n{extra}[sweep.bond]\n{bond}\n'


def point(run_toral, cfg, i=0):
    return json.loads(run_toral("point", cfg, "--index", i, "--json", check=True).stdout)


def nan(x):
    return math.nan if x is None else x


def test_unipotent_open_chain_flags_the_transient_rate(tmp_path, run_toral):
    cfg = tmp_path / "c.toml"
    cfg.write_text(sweep("shear", 32, '"open"', SHEAR) + "[bounds]\nregions = [1, 2, 4, 8]\n")
    rec = point(run_toral, cfg)
    assert rec["/chaos/lambda_max"] == 0 and rec["/chaos/zero_certified"] == 1
    peak = rec["/transient/lambda_max"]
    assert peak == pytest.approx(rec["/limit/lambda_max"], abs=1e-9) and peak > 2.88
    assert rec["/transient/lambda_max_error"] < 1e-9
    assert rec["/transient/absolute"] == pytest.approx(0, abs=1e-9)  # convective: lambda(0) = 0
    assert rec["/transient/gap"] == pytest.approx(peak, abs=1e-12) and rec["/transient/gap_error"] < 1e-9
    assert rec["/points/transient_differs"] == 1
    v = rec["/transient/peak_velocity"]
    assert 0 < v <= 2 and rec["/transient/window"] == pytest.approx(32 / v, rel=1e-12)
    assert rec["/bounds/lyapunov_rate"] == [0, 0, 0, 0]
    # transient Lambda_ell = the ring's, from numpy's eigenvalues of the ring's exported S
    ring = tmp_path / "ring.toml"
    ring.write_text(sweep("shear", 32, '"periodic"', SHEAR) + "[bounds]\nregions = [1, 2, 4, 8]\n")
    mtx = tmp_path / "s.mtx"
    run_toral("point", ring, "--index", 0, "--matrix", mtx, check=True)
    import scipy.io
    S = scipy.io.mmread(str(mtx)).toarray()
    lams = np.sort(np.log(np.abs(np.linalg.eigvals(S))))[::-1]
    want = [lams[: 2 * ell].sum() for ell in (1, 2, 4, 8)]
    np.testing.assert_allclose(rec["/transient/lyapunov_rate"], want, rtol=1e-9)
    # the ring's own Lambda_ell (a config without open chains has no /transient)
    rrec = point(run_toral, ring)
    assert "/points/transient_differs" not in rrec and "/transient/lambda_max" not in rrec
    np.testing.assert_allclose(rrec["/bounds/lyapunov_rate"], want, rtol=1e-9)
    # toral point says it in words
    text = run_toral("point", cfg, "--index", 0, check=True).stdout
    assert "transient" in text and "convective" in text and "2.88727" in text


def test_symmetric_chain_differs_by_finite_size_only(tmp_path, run_toral):
    cfg = tmp_path / "c.toml"
    cfg.write_text(sweep("cat", "[8, 64]", '"open"', CAT))
    gaps = []
    for i in (0, 1):
        rec = point(run_toral, cfg, i)
        assert rec["/transient/peak_velocity"] == 0 and rec["/transient/window"] is None  # +inf: null in JSON
        # the peak does not move: lambda(0) = the peak = the bulk lambda_max
        assert rec["/transient/absolute"] == pytest.approx(rec["/transient/lambda_max"], abs=1e-9)
        assert rec["/transient/lambda_max"] == pytest.approx(rec["/limit/lambda_max"], abs=1e-9)
        assert rec["/points/transient_differs"] == 1
        gaps.append(rec["/transient/gap"])
        text = run_toral("point", cfg, "--index", i, check=True).stdout
        assert "finite size" in text
    assert 0 < gaps[1] < gaps[0] / 10, gaps


def test_asymmetric_gate_is_convective(tmp_path, run_toral):
    cfg = tmp_path / "c.toml"
    cfg.write_text(sweep("asym", 64, '"open"', ASYM))
    rec = point(run_toral, cfg)
    peak, lam0 = rec["/transient/lambda_max"], rec["/transient/absolute"]
    assert peak - lam0 > 0.02 and abs(rec["/transient/peak_velocity"]) > 0.1
    assert rec["/transient/lambda_max"] == pytest.approx(rec["/limit/lambda_max"], abs=1e-8)
    gap, err = rec["/transient/gap"], rec["/transient/gap_error"]
    assert gap == pytest.approx(peak - rec["/chaos/lambda_max"], abs=1e-12) and gap > err
    assert rec["/points/transient_differs"] == 1
    assert "convective" in run_toral("point", cfg, "--index", 0, check=True).stdout


def test_disordered_chain_is_not_determined_and_file_layout(tmp_path, run_toral):
    cfg = tmp_path / "c.toml"
    cfg.write_text(sweep("shear", 16, '["open", "periodic"]', SHEAR) +
                   sweep("dis", 16, '"open"', 'kind = "position"\nfamily = "shear2"\na = 1\nb = { draw = [1, 3] }',
                         "seeds = [1, 2]\n") + "[bounds]\nregions = [1, 2]\n")
    h5 = tmp_path / "r.h5"
    run_toral("run", cfg, "-o", h5, "-q", check=True)
    with h5py.File(h5, "r") as f:
        flag = f["/points/transient_differs"][:]
        bnd = f["/points/boundary"][:]
        sw = f["/points/sweep"][:]
        assert list(flag) == [1, -1, -1, -1]
        assert list(bnd) == [1, 0, 1, 1] and list(sw) == [0, 0, 1, 1]
        lam = f["/transient/lambda_max"][:]
        assert np.isfinite(lam[0]) and np.isnan(lam[1:]).all()
        assert list(f["/transient/region_size"][:]) == [1, 2]
        assert f["/transient/lyapunov_rate"].shape == (4, 2)
        assert np.isnan(f["/transient/lyapunov_rate"][1:]).all()
        assert "transient_lambda_max" in f["/stats"]
    # the file reads back and merges: shards keep the flag
    merged = shard_and_merge(run_toral, cfg, tmp_path)
    with h5py.File(h5, "r") as a, h5py.File(merged, "r") as b:
        for k in ("/points/transient_differs", "/transient/lambda_max", "/transient/lyapunov_rate", "/transient/gap"):
            np.testing.assert_array_equal(a[k][:], b[k][:], err_msg=k)


def test_enabled_key(tmp_path, run_toral):
    off = tmp_path / "off.toml"
    off.write_text(sweep("shear", 16, '"open"', SHEAR) + "[transient]\nenabled = false\n")
    h5 = tmp_path / "off.h5"
    run_toral("run", off, "-o", h5, "-q", check=True)
    with h5py.File(h5, "r") as f:
        assert "transient" not in f and "transient_differs" not in f["/points"]
    ring = tmp_path / "ring.toml"
    ring.write_text(sweep("shear", 16, '"periodic"', SHEAR))
    h5 = tmp_path / "ring.h5"
    run_toral("run", ring, "-o", h5, "-q", check=True)
    with h5py.File(h5, "r") as f:
        assert "transient" not in f  # no open chain: off by default
    on = tmp_path / "on.toml"
    on.write_text(sweep("shear", 16, '"periodic"', SHEAR) + "[transient]\n")
    h5 = tmp_path / "on.h5"
    run_toral("run", on, "-o", h5, "-q", check=True)
    with h5py.File(h5, "r") as f:
        assert list(f["/points/transient_differs"][:]) == [-1]


@pytest.mark.parametrize("body,where", [
    ("[transient]\nenabled = 1\n", "c.toml:11: transient.enabled"),
    ("[transient]\nenable = true\n", "c.toml:11: transient.enable: unknown key"),
    ("[transient]\nperiods = 8\n", "c.toml:11: transient.periods: 8 is outside 16..100000"),
    ("[transient]\nstarts = 0\n", "c.toml:11: transient.starts"),
    ("[transient]\nmethod = \"fast\"\n", "c.toml:11: transient.method"),
])
def test_bad_values(tmp_path, run_toral, body, where):
    cfg = tmp_path / "c.toml"
    cfg.write_text(sweep("shear", 16, '"open"', SHEAR) + body)
    r = run_toral("check", cfg)
    assert r.returncode == 2 and where in r.stderr and len(r.stderr.strip().splitlines()) == 1, r.stderr


DISORDERED = 'kind = "position"\nfamily = "shear2"\na = 0\nb = { draw = [1, 3] }'


def python_peaks(mtx, L, starts, T):
    """m_j(t) = ln max_i max(|q_i|, |p_i|) of S^t e_q(start_j), t = 0..T, Python integers on the whole chain."""
    import scipy.io
    S = scipy.io.mmread(str(mtx)).tocsr()
    rows = [[(int(S.indices[k]), int(round(S.data[k]))) for k in range(S.indptr[i], S.indptr[i + 1])]
            for i in range(S.shape[0])]
    out = []
    for c in starts:
        x = [0] * (2 * L)
        x[c] = 1
        m = [0.0]
        for _ in range(T):
            x = [sum(v * x[j] for j, v in row) for row in rows]
            m.append(math.log(max(max(abs(x[i]), abs(x[L + i])) for i in range(L))))
        out.append(m)
    return out


def test_disordered_unipotent_chain_is_measured(tmp_path, run_toral):
    # Every eigenvalue exponent of this open chain is exactly 0, yet its
    # perturbations grow while they travel: the measured transient rate is
    # the growth of the largest response over periods T/2..T, averaged over 8
    # starts (kernels/spreading.hpp, peak_rate), recomputed here from Python
    # integers on the whole chain (toral propagates each start on the part of
    # the chain its light cone reaches).
    L = 256
    cfg = tmp_path / "c.toml"
    cfg.write_text(sweep("dis", L, '"open"', DISORDERED, "seeds = [3]\n") + '[spectrum]\nmethod = "dense"\n')
    rec = point(run_toral, cfg)
    assert rec["/chaos/lambda_max"] == pytest.approx(0, abs=1e-6)  # L = 256 is past certify_max: numerically 0
    assert rec["/transient/method"] == 2
    T = rec["/transient/measured_periods"]
    assert T == min(256, (L - 3) // 6) == 42 and rec["/transient/measured_starts"] == 8
    lo, hi = 2 * T + 1, L - 2 - 2 * T
    starts = [lo + (hi - lo) * j // 7 for j in range(8)]
    mtx = tmp_path / "s.mtx"
    run_toral("point", cfg, "--index", 0, "--matrix", mtx, check=True)
    m = python_peaks(mtx, L, starts, T)
    late = [(mj[T] - mj[T // 2]) / (T - T // 2) for mj in m]
    early = [(mj[T // 2] - mj[T // 4]) / (T // 2 - T // 4) for mj in m]
    rate = float(np.mean(late))
    err = float(np.std(late, ddof=1) / math.sqrt(8)) + 2 * abs(rate - float(np.mean(early)))
    assert rec["/transient/lambda_max"] == pytest.approx(rate, abs=1e-9)
    assert rec["/transient/lambda_max_error"] == pytest.approx(err, abs=1e-9)
    assert rate > 1.0 and rec["/points/transient_differs"] == 1
    assert rec["/transient/window"] is None and rec["/transient/lyapunov_rate"] == []  # padding: not measured
    text = run_toral("point", cfg, "--index", 0, check=True).stdout
    assert "measured: exact responses of 8 sites" in text and "they differ" in text


def test_measurement_covers_the_exact_rate_of_clean_chains(tmp_path, run_toral):
    # method = "measured" on clean chains: the measured rate with its error
    # must cover the exact max_v lambda(v) (= /limit/lambda_max, an
    # independent quadrature of the Bloch bands).
    for bond, L in ((ASYM, 512), (SHEAR, 1024), (CAT, 256)):
        cfg = tmp_path / "c.toml"
        cfg.write_text(sweep("x", L, '"open"', bond) + '[spectrum]\nmethod = "tangent"\n[spectrum.tangent]\n'
                       "count = 1\nperiods = 4\nwindows = 2\ntransient = 0\n"
                       '[transient]\nmethod = "measured"\n')
        rec = point(run_toral, cfg)
        assert rec["/transient/method"] == 2
        exact = rec["/limit/lambda_max"]
        got, err = rec["/transient/lambda_max"], rec["/transient/lambda_max_error"]
        assert abs(got - exact) <= err and err < 0.1, (bond, L, got, err, exact)


def test_redrawn_open_chain_is_measured(tmp_path, run_toral):
    cfg = tmp_path / "c.toml"
    cfg.write_text(sweep("r", 200, '"open"', DISORDERED, 'seeds = [1]\ndisorder = "redrawn"\n') +
                   '[spectrum.tangent]\ncount = 1\nperiods = 200\nwindows = 4\ntransient = 20\n')
    rec = point(run_toral, cfg)
    assert rec["/transient/method"] == 2 and rec["/transient/measured_periods"] == 32
    assert 0.5 < rec["/transient/lambda_max"] and math.isfinite(rec["/transient/lambda_max_error"])
    assert rec["/points/transient_differs"] in (0, 1)

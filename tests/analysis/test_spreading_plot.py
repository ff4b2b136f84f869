"""Tests of analysis/toral_spreading.py on synthetic /spreading and /rays
groups written with h5py after docs/layout.md (no toral binary needed).

The synthetic profile is built from a chosen lambda(v): ln|dx_t(x)| =
t lambda(x / t) inside the light cone |x| <= 2t and -inf outside, so the
ray rates are lambda(v) itself and its zero crossings are known in closed
form (a piecewise-linear lambda, on which linear interpolation between grid
points that straddle a zero is exact: elementary algebra)."""
from __future__ import annotations

import math
import os
import subprocess
import sys

import h5py
import numpy as np
import pytest

HERE = os.path.dirname(os.path.abspath(__file__))
SCRIPT = os.path.normpath(os.path.join(HERE, "..", "..", "analysis", "toral_spreading.py"))
sys.path.insert(0, os.path.dirname(SCRIPT))

import toral_spreading as ts  # noqa: E402

T, L_MAX = 20, 101
V = np.linspace(-2, 2, 41)


def lam0(v):
    """Point 0: crossings at v = -0.25 and 0.75 (between grid points)."""
    return 0.5 - np.abs(v - 0.25)


def lam1(v):
    """Point 1: positive up to the light cone, no amplitude beyond +-1.5."""
    return np.where(np.abs(v) <= 1.5, 1.0 - 0.1 * v * v, -np.inf)


def profile(lam, L, start, t_kept):
    out = np.full((len(t_kept), L_MAX), np.nan)
    x = np.arange(L) - start
    for k, t in enumerate(t_kept):
        if t == 0:
            out[k, :L] = np.where(x == 0, 0.0, -np.inf)
        else:
            out[k, :L] = np.where(np.abs(x) <= 2 * t, t * lam(x / t), -np.inf)
    return out


def write(path, *, rays=True, starts=3):
    t = np.array([0, 5, 10, 15, 20])
    P = 3
    Ls, start = [L_MAX, 81, 8], [50, 40, -1]   # point 2: the site does not fit (padding)
    with h5py.File(path, "w") as f:
        f.attrs["layout_version"] = np.int64(3)
        f.create_dataset("points/status", data=np.zeros(P, dtype=np.int32))
        g = f.create_group("spreading")
        g.attrs["light_cone_velocity"] = 2.0
        g["t"], g["site"], g["velocity"] = t, np.arange(L_MAX), V
        g["start_index"] = np.arange(starts)
        g["start"] = np.array(start)
        prof = np.full((P, len(t), L_MAX), np.nan)
        rr = np.full((P, len(V)), np.nan)
        for i, lam in enumerate((lam0, lam1)):
            prof[i] = profile(lam, Ls[i], start[i], t)
            rr[i] = lam(V)
        g["log_amplitude"], g["ray_rate"] = prof, rr
        g["starts"] = np.array([[50, 70, 30], [40, 55, 25], [-1, -1, -1]])[:, :starts]
        mean = rr + 0.05
        mean[2] = np.nan
        g["ray_rate_mean"] = mean
        g["ray_rate_se"] = np.where(np.isfinite(mean), 0.02, np.nan)
        g["ray_count"] = np.where(np.isnan(mean), 0, starts)
        g["max_ray_rate_mean"] = np.array([0.56, 1.04, np.nan])
        g["max_ray_rate_se"] = np.array([0.01, 0.03, np.nan])
        if rays:
            r = f.create_group("rays")
            rv = np.linspace(-2, 2, 201)
            r["v"] = rv
            lam = np.full((P, len(rv)), np.nan)
            lam[0] = lam0(rv) + 0.01  # point 0 translation-invariant; points 1, 2 not (NaN)
            r["lyapunov"] = lam
            r["lyapunov_error"] = np.where(np.isnan(lam), np.nan, 1e-12)
            r["butterfly_left"] = np.array([-0.26, np.nan, np.nan])
            r["butterfly_right"] = np.array([0.76, np.nan, np.nan])
            r["cone_left"] = np.array([-1.0, np.nan, np.nan])
            r["cone_right"] = np.array([1.5, np.nan, np.nan])
            r["peak"] = np.array([0.51, np.nan, np.nan])
            r["peak_velocity"] = np.array([0.25, np.nan, np.nan])
            r["absolute"] = np.array([0.26, np.nan, np.nan])


def run(*a):
    return subprocess.run([sys.executable, SCRIPT, *map(str, a)], capture_output=True, text=True,
                          env={**os.environ, "MPLBACKEND": "Agg"})


def test_measured_butterfly_interpolates_the_zero_crossings():
    # Piecewise linear: exact (elementary algebra); -inf: that grid velocity;
    # positive to the end: NaN; NaN (ray left the chain) before a crossing: NaN.
    assert ts.measured_butterfly(V, lam0(V)) == pytest.approx((-0.25, 0.75), abs=1e-12)
    assert ts.measured_butterfly(V, lam1(V)) == pytest.approx((-1.6, 1.6), abs=1e-12)
    assert all(math.isnan(x) for x in ts.measured_butterfly(V, 1.0 + 0 * V))
    r = lam0(V)
    r[V < -0.1] = np.nan
    left, right = ts.measured_butterfly(V, r)
    assert math.isnan(left) and right == pytest.approx(0.75, abs=1e-12)
    assert all(math.isnan(x) for x in ts.measured_butterfly(V, -1.0 - V * V))


def test_load_takes_rays_when_finite_else_the_measured_rates(tmp_path):
    p = tmp_path / "run.h5"
    write(p)
    s0 = ts.load(str(p), 0)
    assert s0.butterfly_source == "rays" and s0.butterfly == (-0.26, 0.76)
    assert s0.rays is not None and s0.rays.cone == (-1.0, 1.5)
    assert s0.log_amplitude.shape == (5, L_MAX) and s0.x[0] == -50 and s0.x[-1] == 50
    assert len(s0.starts) == 3 and s0.max_mean == (0.56, 0.01)
    s1 = ts.load(str(p), 1)  # /rays NaN for it: from the measured mean (lam1 + 0.05: the same crossings)
    assert s1.rays is None and s1.butterfly_source == "measured"
    assert s1.butterfly == pytest.approx((-1.6, 1.6), abs=1e-12)
    assert s1.log_amplitude.shape == (5, 81) and s1.x[0] == -40
    # the profile is t lambda(x/t): the rates read back along rays
    np.testing.assert_allclose(s1.log_amplitude[-1, 40 + 10] / T, lam1(np.array(0.5)), rtol=1e-15)


def test_file_without_rays_and_with_one_start(tmp_path):
    p = tmp_path / "norays.h5"
    write(p, rays=False, starts=1)
    s = ts.load(str(p), 0)
    assert s.rays is None and s.ray_rate_mean is None and s.butterfly_source == "measured"
    assert s.butterfly == pytest.approx((-0.25, 0.75), abs=1e-12)  # from ray_rate
    assert math.isnan(s.max_mean[0])
    png = tmp_path / "n.png"
    r = run(p, "--point", 0, "--point", 1, "-o", png, "--table")
    assert r.returncode == 0, r.stderr
    assert png.stat().st_size > 10000
    rows = [l.split() for l in r.stdout.splitlines()]
    assert rows[0][-3:] == ["v_B-", "v_B+", "source"]
    assert rows[1][0] == "0" and rows[1][2] == "1" and rows[1][-1] == "measured"
    assert float(rows[1][-3]) == pytest.approx(-0.25, abs=1e-4) and float(rows[1][-2]) == pytest.approx(0.75, abs=1e-4)


def test_plot_and_table_with_rays(tmp_path):
    p = tmp_path / "run.h5"
    write(p)
    png = tmp_path / "s.png"
    r = run(p, "--point", 0, "--point", 1, "-o", png, "--table")
    assert r.returncode == 0, r.stderr
    assert png.stat().st_size > 10000
    rows = [l.split() for l in r.stdout.splitlines()]
    assert [x[-1] for x in rows[1:]] == ["rays", "measured"]
    assert rows[1][6:8] == ["0.5600", "0.0100"]  # max_ray_rate_mean and its SE as stored
    ts.plot_points([ts.load(str(p), 1)], str(tmp_path / "one.png"))


def test_bad_input_is_one_line_and_exit_2(tmp_path):
    p = tmp_path / "run.h5"
    write(p)
    png = tmp_path / "x.png"
    bare = tmp_path / "bare.h5"
    with h5py.File(bare, "w") as f:
        f.attrs["layout_version"] = np.int64(3)
    text = tmp_path / "text.h5"
    text.write_text("not hdf5")
    for args, fragment in (((p, "--point", 3, "-o", png), "outside 0..2"),
                           ((p, "--point", 2, "-o", png), "no spreading profile"),
                           ((tmp_path / "none.h5", "--table"), "no such file"),
                           ((text, "--table"), "not an HDF5 file"),
                           ((bare, "--table"), "no /spreading group"),
                           ((p,), "nothing to do")):
        r = run(*args)
        assert r.returncode == 2, (args, r.stderr)
        lines = r.stderr.strip().splitlines()
        assert len(lines) == 1 and fragment in lines[0] and lines[0].startswith("toral_spreading: error:"), r.stderr
    assert not png.exists()

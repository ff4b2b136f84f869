"""Tests of analysis/toral_curves.py on synthetic /entanglement groups
written with h5py after docs/layout.md (no toral binary needed)."""
from __future__ import annotations

import os
import subprocess
import sys

import h5py
import numpy as np
import pytest

HERE = os.path.dirname(os.path.abspath(__file__))
SCRIPT = os.path.normpath(os.path.join(HERE, "..", "..", "analysis", "toral_curves.py"))
sys.path.insert(0, os.path.dirname(SCRIPT))

import toral_curves as tc  # noqa: E402


def write(path, *, stabilizer=True, gaussian=True):
    P, nR, nM, T = 3, 2, 2, 10
    t = np.arange(T + 1)
    with h5py.File(path, "w") as f:
        f.attrs["layout_version"] = np.int64(3)
        f.create_dataset("points/status", data=np.zeros(P, dtype=np.int32))
        e = f.create_group("entanglement")
        e["t"] = t
        e["region_size"] = np.array([1, 3])
        e["region_sites"] = np.array([[0, -1, -1], [0, 1, 2]])
        e["cuts"] = np.array([[2, 2], [2, -1], [1, 1]])  # region 1 does not fit point 1
        lam = np.array([[1.0, 2.0], [0.5, np.nan], [0.25, 0.75]])
        e["lyapunov_rate"] = lam
        rate = np.array([[1.0, 1.6], [0.5, np.nan], [0.0, 0.75]])  # region (0, 1) reaches less; (2, 0) none
        e["region_rate"] = rate
        if gaussian:
            S = lam[:, :, None] * t[None, None, :]
            e["gaussian/entropy"] = S
            e["gaussian/radius"] = np.full(S.shape, 1e-13)
            e["gaussian/slope"] = lam
            e["gaussian/slope_over_lyapunov"] = np.where(np.isfinite(lam), 1.0, np.nan)
            e["gaussian/slope_over_region_rate"] = np.where(rate > 0, lam / np.where(rate > 0, rate, 1), np.inf)
        if stabilizer:
            e["stabilizer/local_dim"] = np.array([2, 3])
            cap = np.log(np.array([2, 3]))[None, :, None] * np.ones((P, nM, nR))
            e["stabilizer/cap"] = cap
            e["stabilizer/lightcone_rate"] = 2 * cap
            e["stabilizer/entropy"] = np.minimum(0.1 * t[None, None, None, :], cap[..., None])
            e["stabilizer/slope"] = np.full((P, nM, nR), 0.05)
            e["stabilizer/slope_over_lyapunov"] = 0.05 / lam[:, None, :] * np.ones((P, nM, nR))
            e["stabilizer/slope_over_lightcone"] = 0.05 / (2 * cap)


def test_table_lists_fitting_regions_with_the_stored_ratios(tmp_path):
    p = tmp_path / "run.h5"
    write(p)
    c = tc.load(str(p))
    lines = tc.format_table(c).splitlines()
    assert lines[0].split() == ["point", "region", "|A|", "Lambda_A", "rate_A", "gauss_slope", "gauss/Lambda",
                                "gauss/rate", "N2_slope", "N2/Lambda", "N2/light", "N3_slope", "N3/Lambda",
                                "N3/light"]
    rows = [l.split() for l in lines[1:]]
    assert [(r[0], r[1]) for r in rows] == [("0", "0"), ("0", "1"), ("1", "0"), ("2", "0"), ("2", "1")]
    r = rows[1]  # point 0, region 1: Lambda 2, rate 1.6, slope 2, ratios 1 and 1.25; N = 2: 0.05 / 2, 0.05 / (2 ln 2)
    assert float(r[3]) == 2.0 and float(r[4]) == 1.6 and float(r[5]) == 2.0 and float(r[6]) == 1.0
    assert float(r[7]) == 1.25
    assert float(r[9]) == pytest.approx(0.025, rel=1e-3)
    assert float(r[10]) == pytest.approx(0.05 / (2 * np.log(2)), rel=1e-3)
    assert rows[3][7] == "inf"  # a positive slope over a zero rate (docs/bounds.md)


def test_plot_is_written_and_bad_input_is_one_line(tmp_path):
    p = tmp_path / "run.h5"
    write(p)
    png = tmp_path / "c.png"
    run = lambda *a: subprocess.run([sys.executable, SCRIPT, *map(str, a)], capture_output=True, text=True,
                                    env={**os.environ, "MPLBACKEND": "Agg"})
    r = run(p, "--point", 1, "-o", png)
    assert r.returncode == 0, r.stderr
    assert png.stat().st_size > 1000
    for args, fragment in (((p, "--point", 7, "-o", png), "out of range"),
                           ((tmp_path / "none.h5", "--table"), "no such file"),
                           ((p,), "nothing to do")):
        r = run(*args)
        assert r.returncode == 2
        assert len(r.stderr.strip().splitlines()) == 1 and fragment in r.stderr
    bare = tmp_path / "bare.h5"
    with h5py.File(bare, "w") as f:
        f.attrs["layout_version"] = np.int64(3)
    r = run(bare, "--table")
    assert r.returncode == 2 and "no /entanglement group" in r.stderr


def test_gaussian_only_and_stabilizer_only_files(tmp_path):
    for kw, cols in (({"stabilizer": False}, 8), ({"gaussian": False}, 11)):
        p = tmp_path / f"{sorted(kw)[0]}.h5"
        write(p, **kw)
        c = tc.load(str(p))
        assert len(tc.format_table(c).splitlines()[0].split()) == cols
        tc.plot_point(c, 2, str(tmp_path / "x.png"))


def test_open_chain_transient_rate_column_and_line(tmp_path):
    # An open chain whose eigenvalue rates vanish (Lambda = 0, slope/Lambda = inf)
    # while its regions grow at the transient rate (docs/rays.md): the table gets
    # the transient rate, its window and the stored ratio; the plot draws it.
    p = tmp_path / "open.h5"
    write(p, stabilizer=False)
    with h5py.File(p, "a") as f:
        e = f["entanglement"]
        tr = np.array([[2.0, 4.0], [np.nan, np.nan], [0.5, 1.0]])  # point 1: a ring (NaN)
        e["transient_rate"] = tr
        e["transient_window"] = np.array([[4, 4], [-1, -1], [30, 30]])
        slope = e["gaussian/slope"][()]
        e["gaussian/slope_over_transient"] = slope / tr
    c = tc.load(str(p))
    lines = tc.format_table(c).splitlines()
    head = lines[0].split()
    assert head[5:7] == ["transient_A", "window"] and head[-1] == "gauss/transient"
    rows = [l.split() for l in lines[1:]]
    r = rows[1]  # point 0, region 1: transient 4, window 4, slope 2 -> 0.5
    assert float(r[5]) == 4.0 and r[6] == "4" and float(r[-1]) == 0.5
    assert rows[2][5] == "nan" and rows[2][6] == "-1"  # the ring
    png = tmp_path / "open.png"
    tc.plot_point(c, 0, str(png))
    assert png.stat().st_size > 1000
    # a file without the transient datasets (older runs) keeps the old columns
    q = tmp_path / "old.h5"
    write(q, stabilizer=False)
    assert "transient_A" not in tc.format_table(tc.load(str(q))).splitlines()[0]

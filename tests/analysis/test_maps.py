"""Tests of analysis/toral_maps.py on synthetic result files written with
h5py after docs/layout.md (no toral binary needed).

    /usr/bin/python3 -m pytest tests/analysis
"""
from __future__ import annotations

import itertools
import os
import struct
import subprocess
import sys

import h5py
import numpy as np
import pytest

HERE = os.path.dirname(os.path.abspath(__file__))
SCRIPT = os.path.normpath(os.path.join(HERE, "..", "..", "analysis", "toral_maps.py"))
sys.path.insert(0, os.path.dirname(SCRIPT))

import toral_maps as tm  # noqa: E402

ABSENT = np.iinfo(np.int64).min
STATUS_LABELS = ["ok", "invalid_model", "overflow", "solver_failed", "no_method", "internal_error"]


# ---------------------------------------------------------------- synthetic files


def _vlstr_list(values):
    return np.array(values, dtype=h5py.string_dtype("utf-8"))


def write_result(path, params: dict[str, np.ndarray], status, lambda_max, ks_density, *,
                 swept, sweep_names, layout_version=3, K=3, bins=2, ells=(1, 2), Ns=(2,), bulk=False):
    """A complete layout-2 file (every required group and dataset)."""
    status = np.asarray(status, dtype=np.int32)
    P = status.size
    nan = np.full(P, np.nan)
    with h5py.File(path, "w") as f:
        f.attrs["toral_version"] = "test"
        f.attrs["layout_version"] = np.int64(layout_version)
        f.attrs["config"] = "[[sweep]]\n"
        f.attrs["config_source"] = "synthetic"
        f.attrs["created"] = "2024-01-01T00:00:00Z"
        f.attrs["ranks"] = np.int64(1)
        f.attrs["point_count"] = np.int64(P)
        f.attrs["sweep_names"] = _vlstr_list(sweep_names)

        def ds(group, name, data, units, meaning, dtype=None):
            d = group.create_dataset(name, data=np.asarray(data, dtype=dtype))
            d.attrs["units"] = units
            d.attrs["meaning"] = meaning
            return d

        pts = f.create_group("points")
        pts.attrs["parameters"] = _vlstr_list(list(params))
        pts.attrs["swept"] = _vlstr_list(swept)
        pts.attrs["absent"] = np.int64(ABSENT)
        for name, v in params.items():
            ds(pts, name, v, "1", f"parameter {name}", np.int64)
        d = ds(pts, "status", status, "", "status", np.int32)
        d.attrs["labels"] = _vlstr_list(STATUS_LABELS)
        msgs = np.array([b"" if s == 0 else b"failed" for s in status], dtype="S256")
        ds(pts, "message", msgs, "", "message")
        d = ds(pts, "method", np.where(status == 0, 2, 0), "", "method", np.int32)
        d.attrs["labels"] = _vlstr_list(["none", "bloch", "dense", "krylov"])
        ds(pts, "wall_time", np.full(P, 0.01), "s", "wall time")

        ch = f.create_group("chaos")
        ds(ch, "lambda_max", lambda_max, "1/period", "largest exponent", np.float64)
        ds(ch, "ks_rate", np.asarray(ks_density) * 4, "nats/period", "KS rate", np.float64)
        ds(ch, "ks_density", ks_density, "nats/(period*site)", "KS density", np.float64)
        ds(ch, "unstable_count", np.where(status == 0, 1, -1), "1", "unstable", np.int64)
        ex = np.full((P, K), np.nan)
        ex[status == 0, 0] = np.asarray(lambda_max)[status == 0]
        ds(ch, "exponents", ex, "1/period", "exponents")
        ds(ch, "exponent_count", np.where(status == 0, 1, 0), "1", "count", np.int64)
        acc = ch.create_group("accuracy")
        for n in ("pairing_defect", "sum_defect", "error_bound"):
            ds(acc, n, nan, "1/period", n)
        h = ch.create_group("histogram")
        ds(h, "counts", np.full((P, bins), np.nan), "1", "counts")
        ds(h, "edges", np.full((P, bins + 1), np.nan), "1/period", "edges")
        if bulk:
            lim = f.create_group("limit")
            for n, u in (("lambda_max", "1/period"), ("ks_density", "nats/(period*site)"),
                         ("accuracy", "1/period")):
                ds(lim, n, nan, u, n)
            lh = lim.create_group("histogram")
            ds(lh, "counts", np.full((P, bins), np.nan), "1", "counts")
            ds(lh, "edges", np.full((P, bins + 1), np.nan), "1/period", "edges")
        b = f.create_group("bounds")
        nl, nN = len(ells), len(Ns)
        ds(b, "region_size", np.array(ells), "sites", "ell", np.int64)
        ds(b, "local_dim", np.array(Ns), "1", "N", np.int64)
        ds(b, "cuts", np.full((P, nl), 2), "1", "cuts", np.int64)
        ds(b, "lyapunov_rate", np.full((P, nl), np.nan), "nats/period", "rate")
        ds(b, "hilbert_cap", np.full((P, nl, nN), np.nan), "nats", "cap")
        ds(b, "lightcone_rate", np.full((P, nl, nN), np.nan), "nats/period", "lc")
        ds(b, "ehrenfest_time", np.full((P, nN), np.nan), "periods", "te")
        ds(b, "saturation_lyapunov", np.full((P, nl, nN), np.nan), "periods", "sat")
        ds(b, "saturation_lightcone", np.full((P, nl, nN), np.nan), "periods", "sat")
    return path


@pytest.fixture
def run_file(tmp_path):
    """Two sweeps. Sweep 0 'chain': sites x bond_a x seed (3 seeds), with some
    failed points and one NaN value of an ok point. Sweep 1 'ring': sites
    only, bond_a absent."""
    rng = np.random.default_rng(7)
    rows = []
    for L, a, seed in itertools.product([4, 6, 8, 10], [0, 1, 2], [1, 2, 3]):
        rows.append((0, L, 0, seed, a))
    for L in [4, 8]:
        rows.append((1, L, 1, ABSENT, ABSENT))
    arr = np.array(rows, dtype=np.int64)
    P = len(rows)
    params = {"sweep": arr[:, 0], "sites": arr[:, 1], "boundary": arr[:, 2], "seed": arr[:, 3],
              "bond_a": arr[:, 4]}
    lam = rng.uniform(0.1, 2.0, P)
    ksd = rng.uniform(0.0, 1.0, P)
    status = np.zeros(P, dtype=np.int32)
    status[[1, 5, 20]] = [3, 1, 5]  # failed: their values must not count
    lam[status != 0] = np.nan
    ksd[status != 0] = np.nan
    lam[[2]] = 1e6  # a value of a failed point would be huge: check it is excluded
    status[2] = 2
    ksd[7] = np.nan  # an ok point without a KS density
    path = write_result(str(tmp_path / "run.h5"), params, status, lam, ksd,
                        swept=["sweep", "sites", "seed", "bond_a"], sweep_names=["chain", "ring"], bulk=True)
    return {"path": path, "params": params, "lam": lam, "ksd": ksd, "status": status}


# ---------------------------------------------------------------- gridding


def expected_mean(values, params, status, sel, xname, xv, yname, yv):
    m = sel & (params[xname] == xv) & (params[yname] == yv) & (status == 0) & np.isfinite(values)
    return values[m].mean() if m.any() else np.nan


def test_load_reads_parameters_in_declared_order(run_file):
    d = tm.load(run_file["path"])
    assert d.names == ["sweep", "sites", "boundary", "seed", "bond_a"]
    assert d.sweep_names == ["chain", "ring"]
    assert d.swept == ["sweep", "sites", "seed", "bond_a"]
    assert d.units["lambda_max"] == "1/period"
    np.testing.assert_array_equal(d.status, run_file["status"])


def test_default_axes_skip_constant_and_prefer_non_seed(run_file):
    d = tm.load(run_file["path"])
    mask = tm.select(d, 0)
    assert tm.default_axes(d, mask) == ("sites", "bond_a")
    # sweep 1 only varies in sites
    assert tm.default_axes(d, tm.select(d, 1)) == ("sites", None)
    # with bond_a fixed, seed is the second varying parameter
    assert tm.default_axes(d, tm.select(d, 0, {"bond_a": 1})) == ("sites", "seed")


def test_grid_means_match_numpy(run_file):
    d = tm.load(run_file["path"])
    p, st = run_file["params"], run_file["status"]
    sel = p["sweep"] == 0
    g = tm.grid(d, "sites", "bond_a", tm.select(d, 0))
    np.testing.assert_array_equal(g.xvals, [4, 6, 8, 10])
    np.testing.assert_array_equal(g.yvals, [0, 1, 2])
    assert g.mean["lambda_max"].shape == (3, 4)
    for j, a in enumerate(g.yvals):
        for i, L in enumerate(g.xvals):
            for q, v in (("lambda_max", run_file["lam"]), ("ks_density", run_file["ksd"])):
                want = expected_mean(v, p, st, sel, "sites", L, "bond_a", a)
                np.testing.assert_allclose(g.mean[q][j, i], want, rtol=1e-14, equal_nan=True)
            cell = sel & (p["sites"] == L) & (p["bond_a"] == a)
            assert g.count[j, i] == int((cell & (st == 0)).sum())
            assert g.failed[j, i] == int((cell & (st != 0)).sum())
    assert g.total_failed == int((sel & (st != 0)).sum()) == 4
    assert g.total_points == int(sel.sum())
    assert np.nanmax(g.mean["lambda_max"]) < 10  # the failed point's 1e6 is excluded


def test_grid_where_filter_and_single_axis(run_file):
    d = tm.load(run_file["path"])
    p, st, lam = run_file["params"], run_file["status"], run_file["lam"]
    where = tm.parse_where(["bond_a=2", "seed=3"], d)
    assert where == {"bond_a": 2, "seed": 3}
    g = tm.grid(d, "sites", None, tm.select(d, 0, where))
    assert g.mean["lambda_max"].shape == (1, 4)
    for i, L in enumerate(g.xvals):
        m = (p["sweep"] == 0) & (p["bond_a"] == 2) & (p["seed"] == 3) & (p["sites"] == L) & (st == 0)
        np.testing.assert_allclose(g.mean["lambda_max"][0, i], lam[m].mean() if m.any() else np.nan,
                                   equal_nan=True)


def test_all_failed_cell_is_nan(tmp_path):
    params = {"sweep": np.zeros(4, np.int64), "x": np.array([0, 0, 1, 1]), "y": np.array([0, 0, 0, 0])}
    path = write_result(str(tmp_path / "f.h5"), params, [0, 0, 3, 3], [1.0, 3.0, np.nan, np.nan],
                        [0.5, 0.5, np.nan, np.nan], swept=["x"], sweep_names=["s"])
    d = tm.load(path)
    g = tm.grid(d, "x", "y", tm.select(d, 0))
    np.testing.assert_allclose(g.mean["lambda_max"], [[2.0, np.nan]], equal_nan=True)
    np.testing.assert_array_equal(g.failed, [[0, 2]])


def test_sweep_by_name_and_index(run_file):
    d = tm.load(run_file["path"])
    assert tm.resolve_sweep(d, "ring") == 1
    assert tm.resolve_sweep(d, "1") == 1
    assert tm.resolve_sweep(d, None) == 0
    with pytest.raises(tm.MapError, match="unknown sweep"):
        tm.resolve_sweep(d, "nope")
    with pytest.raises(tm.MapError, match="out of range"):
        tm.resolve_sweep(d, "5")


# ---------------------------------------------------------------- PNG and table


def png_size(path):
    with open(path, "rb") as fh:
        head = fh.read(33)
    assert head[:8] == b"\x89PNG\r\n\x1a\n", "not a PNG signature"
    assert head[12:16] == b"IHDR"
    return struct.unpack(">II", head[16:24])


def test_png_written(run_file, tmp_path, capsys):
    out = str(tmp_path / "maps.png")
    assert tm.main([run_file["path"], "-o", out]) == 0
    w, h = png_size(out)
    assert w >= 400 and h >= 200
    assert os.path.getsize(out) > 10_000
    assert "wrote" in capsys.readouterr().err


def test_title_counts_failed(run_file):
    d = tm.load(run_file["path"])
    g = tm.grid(d, "sites", "bond_a", tm.select(d, 0))
    t = tm.title_of(d, g, 0, {})
    assert "4 failed" in t and "chain" in t and "32 points" in t


def test_default_output_name(run_file):
    assert tm.main([run_file["path"], "--sweep", "ring"]) == 0
    png_size(run_file["path"][:-3] + ".maps.png")


def test_table_output(run_file, capsys):
    assert tm.main([run_file["path"], "--table", "--sweep", "chain", "--x", "sites", "--y", "bond_a"]) == 0
    out = capsys.readouterr().out.strip().splitlines()
    assert out[0].split() == ["sites", "bond_a", "points", "failed", "mean_lambda_max", "mean_ks_density"]
    body = [line.split() for line in out[1:]]
    assert len(body) == 12
    p, st, lam, ksd = run_file["params"], run_file["status"], run_file["lam"], run_file["ksd"]
    sel = p["sweep"] == 0
    for L, a, n, nf, ml, mk in body:
        L, a = int(L), int(a)
        cell = sel & (p["sites"] == L) & (p["bond_a"] == a)
        assert int(n) == int((cell & (st == 0)).sum())
        assert int(nf) == int((cell & (st != 0)).sum())
        np.testing.assert_allclose(float(ml), expected_mean(lam, p, st, sel, "sites", L, "bond_a", a),
                                   rtol=1e-9, equal_nan=True)
        np.testing.assert_allclose(float(mk), expected_mean(ksd, p, st, sel, "sites", L, "bond_a", a),
                                   rtol=1e-9, equal_nan=True)


def test_table_without_png(run_file, tmp_path):
    before = set(os.listdir(tmp_path))
    assert tm.main([run_file["path"], "--table"]) == 0
    assert set(os.listdir(tmp_path)) == before


def test_absent_values_are_labelled(run_file, capsys):
    assert tm.main([run_file["path"], "--table", "--x", "sites", "--y", "bond_a", "--sweep", "ring"]) == 0
    out = capsys.readouterr().out
    assert "absent" in out


# ---------------------------------------------------------------- errors


def one_line_error(capsys, needle):
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1, err
    assert err[0].startswith("toral_maps: error:"), err
    assert needle in err[0], err


def test_missing_file(tmp_path, capsys):
    assert tm.main([str(tmp_path / "nope.h5")]) == 2
    one_line_error(capsys, "no such file")


def test_not_hdf5(tmp_path, capsys):
    p = tmp_path / "text.h5"
    p.write_text("hello\n")
    assert tm.main([str(p)]) == 2
    one_line_error(capsys, "not an HDF5 file")


def test_hdf5_but_not_toral(tmp_path, capsys):
    p = str(tmp_path / "other.h5")
    with h5py.File(p, "w") as f:
        f["x"] = np.arange(3)
    assert tm.main([p]) == 2
    one_line_error(capsys, "not a toral result file")


@pytest.mark.parametrize("version", [1, 4])
def test_wrong_layout_version(tmp_path, capsys, version):
    # 1: a file of an older toral (per-point /bounds/cuts); 4: a later one
    params = {"sweep": np.zeros(2, np.int64), "x": np.array([0, 1])}
    p = write_result(str(tmp_path / f"v{version}.h5"), params, [0, 0], [1.0, 2.0], [0.1, 0.2], swept=["x"],
                     sweep_names=["s"], layout_version=version)
    assert tm.main([p]) == 2
    one_line_error(capsys, f"unsupported layout_version {version}")


def test_incomplete_file(tmp_path, capsys):
    p = str(tmp_path / "inc.h5")
    with h5py.File(p, "w") as f:
        f.attrs["layout_version"] = np.int64(3)
        f.create_group("points")
    assert tm.main([p]) == 2
    one_line_error(capsys, "/points/status")


@pytest.mark.parametrize("args,needle", [
    (["--x", "nope"], "unknown parameter 'nope'"),
    (["--x", "sites", "--y", "nope"], "unknown parameter 'nope'"),
    (["--where", "nope=1"], "unknown parameter 'nope'"),
    (["--where", "sites"], "name=value"),
    (["--where", "sites=four"], "not an integer"),
    (["--where", "sites=5"], "no points selected"),
    (["--sweep", "nope"], "unknown sweep"),
    (["--y", "sites"], "--y given without --x"),
    (["--x", "sites", "--y", "sites"], "both"),
    (["--where", "bond_a=1", "--where", "seed=1", "--where", "sites=4"], "no parameter varies"),
])
def test_usage_errors(run_file, capsys, args, needle):
    assert tm.main([run_file["path"], *args]) == 2
    one_line_error(capsys, needle)


def test_unwritable_output(run_file, tmp_path, capsys):
    assert tm.main([run_file["path"], "-o", str(tmp_path / "no" / "dir" / "x.png")]) == 2
    one_line_error(capsys, "cannot write")


def test_cli_subprocess(run_file, tmp_path):
    out = str(tmp_path / "cli.png")
    r = subprocess.run([sys.executable, SCRIPT, run_file["path"], "-o", out, "--table"],
                       capture_output=True, text=True, env={**os.environ, "MPLBACKEND": "Agg"})
    assert r.returncode == 0, r.stderr
    assert "mean_lambda_max" in r.stdout
    png_size(out)
    r = subprocess.run([sys.executable, SCRIPT, str(tmp_path / "missing.h5")], capture_output=True, text=True)
    assert r.returncode == 2
    assert r.stderr.strip().count("\n") == 0 and "no such file" in r.stderr


def test_layout_version_2_still_read(tmp_path):
    # Version 3 added dimension scales and the schema attributes and kept every
    # dataset the scripts read (docs/layout.md): a version-2 file still opens.
    params = {"sweep": np.zeros(2, np.int64), "x": np.array([0, 1])}
    p = write_result(str(tmp_path / "v2.h5"), params, [0, 0], [1.0, 2.0], [0.1, 0.2], swept=["x"],
                     sweep_names=["s"], layout_version=2)
    assert tm.main([p, "--output", str(tmp_path / "v2.png")]) == 0

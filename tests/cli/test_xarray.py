"""Result files open with xarray (engine h5netcdf): every axis of every
dataset is a named HDF5 dimension scale, values read through xarray equal
h5py's, the docs/xarray.md example runs, and shards, merged files and
2-rank runs carry the same axes."""
import posixpath
import re
import shutil

import h5py
import numpy as np
import pytest

from conftest import ROOT

xr = pytest.importorskip("xarray")
pytest.importorskip("h5netcdf")

# A clean scan (the docs' scenario, sites x boundary x a x b = 24 points) and a
# small seed ensemble (so /stats is written); an [entanglement] table with
# Gaussian and stabilizer curves, the profile, and a region given as a site
# list; a [bands] table (bands of the translation-invariant points, padding
# for the drawn ensemble). About a second on one rank.
CONFIG = """
title = "xarray test"
[[sweep]]
name = "scan"
sites = [8, 12]
boundary = ["periodic", "open"]
[sweep.bond]
family = "shear2"
a = [1, 2]
b = [1, 2, 3]

[[sweep]]
name = "ens"
sites = 10
boundary = "open"
seeds = { from = 1, to = 3 }
[sweep.bond]
family = "shear2"
a = { draw = [1, 2] }
b = 1

[bounds]
regions = [1, 2, 4]
local_dims = [2, 3]

[entanglement]
periods = 6
regions = [1, 3, [0, 5]]
gaussian = true
stabilizer_dims = [2, 3]
profile = true
profile_stride = 2

[bands]
grid = 9

[spreading]
periods = 12
stride = 4

[vectors]
count = 2
windows = 2

[rays]
velocities = 9
"""
NPOINTS = 2 * 2 * 2 * 3 + 3

# Groups that must be there (the walk below must not pass vacuously).
EXPECTED_GROUPS = {
    "/", "/points", "/chaos", "/chaos/accuracy", "/chaos/histogram", "/chaos/solver",
    "/limit", "/limit/histogram", "/bounds", "/entanglement", "/entanglement/gaussian",
    "/entanglement/stabilizer", "/stats", "/stats/lambda_max", "/stats/hilbert_cap",
    "/stats/stabilizer_slope", "/bands", "/stats/bands_elliptic_fraction", "/spreading",
    "/vectors", "/stats/vectors_exponent", "/rays", "/stats/rays_peak", "/transient",
    "/stats/transient_lambda_max",
}
TIMING = {"/points/wall_time", "/chaos/solver/wall_time", "/entanglement/wall_time"}


def run(run_toral, d, *extra, ranks=None, name="r.h5"):
    cfg = d / "c.toml"
    cfg.write_text(CONFIG)
    out = d / name
    run_toral("run", cfg, "-o", out, "-q", *extra, ranks=ranks, check=True)
    return out


@pytest.fixture(scope="module")
def result(tmp_path_factory, run_toral):
    return run(run_toral, tmp_path_factory.mktemp("xa"))


def is_scale(ds):
    return h5py.h5ds.is_scale(ds.id)


def walk(path):
    """(groups holding datasets, {dataset path: h5py info}) of a file."""
    groups, info = set(), {}
    with h5py.File(path, "r") as f:
        def visit(name, obj):
            if isinstance(obj, h5py.Dataset):
                full = "/" + name
                groups.add(posixpath.dirname(full))
                info[full] = dict(
                    shape=obj.shape, scale=is_scale(obj),
                    attached=[[s.name for s in obj.dims[k].values()] for k in range(obj.ndim)])
        f.visititems(visit)
    return groups, info


def nearest_scale(info, group, name):
    """The dataset `name` in `group` or the nearest enclosing group (netCDF scoping)."""
    while True:
        cand = posixpath.join(group, name)
        if cand in info:
            return cand
        if group == "/":
            return None
        group = posixpath.dirname(group)


def check_named_dims(result):
    """Every group opens with xarray, every axis named after its attached scale."""
    groups, info = walk(result)
    assert EXPECTED_GROUPS <= groups, sorted(EXPECTED_GROUPS - groups)
    checked = 0
    with h5py.File(result, "r") as f:
        for g in sorted(groups):
            # h5netcdf refuses an axis without a scale by default; asked for
            # phony dimensions instead, it must still have none to invent
            with xr.open_dataset(result, group=g, engine="h5netcdf", phony_dims="sort") as ds:
                phony = [d for d in ds.dims if str(d).startswith("phony_dim")]
                assert not phony, (g, phony)
            with xr.open_dataset(result, group=g, engine="h5netcdf") as ds:
                assert not [d for d in ds.dims if str(d).startswith("phony_dim")], g
                for v in list(ds.data_vars) + list(ds.coords):
                    full = posixpath.join(g, v)
                    want = tuple(posixpath.basename(a[0]) for a in info[full]["attached"]) \
                        if not info[full]["scale"] else (v,)
                    assert ds[v].dims == want, (full, ds[v].dims, want)
                    for k, dim in enumerate(ds[v].dims):
                        # the dimension xarray names resolves (netCDF scoping)
                        # to the very scale that is attached in the file
                        scale = nearest_scale(info, g, dim)
                        assert scale is not None and info[scale]["scale"], (full, dim)
                        if not info[full]["scale"]:
                            assert info[full]["attached"][k][0] == scale, (full, k, scale)
                        assert f[scale].shape == (ds[v].shape[k],), (full, dim)
                        if dim in ds.coords:  # coordinate values = the scale's
                            np.testing.assert_array_equal(ds[dim].values, f[scale][()], err_msg=full)
                    checked += 1
    assert checked > 150


def test_every_group_opens_with_named_dims(result):
    check_named_dims(result)


def test_every_dataset_has_a_scale_on_each_axis(result):
    _, info = walk(result)
    with h5py.File(result, "r") as f:
        scales = [p for p, i in info.items() if i["scale"]]
        assert {"/point", "/chaos/exponent", "/chaos/histogram/bin", "/chaos/histogram/edge",
                "/bounds/region_size", "/bounds/local_dim", "/entanglement/t",
                "/entanglement/region", "/entanglement/stabilizer/local_dim",
                "/stats/group"} <= set(scales)
        for p, i in info.items():
            if i["scale"]:
                assert f[p].ndim == 1, p
                continue
            for k in range(len(i["shape"])):
                assert f[p].dims[k].keys(), f"{p}: no dimension scale on axis {k}"
                assert len(i["attached"][k]) == 1, (p, k, i["attached"][k])
                assert info[i["attached"][k][0]]["shape"] == (i["shape"][k],), (p, k)
            if i["shape"] and i["shape"][0] == NPOINTS and not p.startswith("/stats"):
                assert i["attached"][0] == ["/point"], p


def test_point_axis_is_points_index(result):
    with h5py.File(result, "r") as f:
        lam = f["chaos/lambda_max"]
        assert [s.name for s in lam.dims[0].values()] == ["/point"]
        assert f["point"].attrs["NAME"] == b"point"
        np.testing.assert_array_equal(lam.dims[0][0][()], f["points/index"][()])
        index = f["points/index"][()]
    with xr.open_dataset(result, engine="h5netcdf") as root:
        np.testing.assert_array_equal(root["point"].values, index)
    with xr.open_dataset(result, group="chaos", engine="h5netcdf") as chaos:
        assert chaos["lambda_max"].dims == ("point",)


def test_shards_and_merged_file(result, tmp_path, run_toral):
    shards = [run(run_toral, tmp_path, "--shard", f"{i}/2", name=f"s{i}.h5") for i in range(2)]
    # a shard holds every other point: the axis is not simply 0..P-1 there
    with h5py.File(shards[1], "r") as f:
        index = f["points/index"][()]
        np.testing.assert_array_equal(f["chaos/lambda_max"].dims[0][0][()], index)
    assert len(index) == NPOINTS // 2 and not np.array_equal(index, np.arange(len(index)))
    with xr.open_dataset(shards[1], engine="h5netcdf") as root:
        np.testing.assert_array_equal(root["point"].values, index)
    merged = tmp_path / "merged.h5"
    run_toral("merge", merged, *reversed(shards), check=True)
    check_named_dims(merged)
    _, info_m = walk(merged)
    _, info_r = walk(result)
    assert info_m == info_r  # same datasets, shapes, scales and attachments
    with h5py.File(merged, "r") as m, h5py.File(result, "r") as r:
        for p in (p for p, i in info_r.items() if i["scale"]):
            np.testing.assert_array_equal(m[p][()], r[p][()], err_msg=p)


def test_values_match_h5py(result):
    opts = dict(engine="h5netcdf")
    with h5py.File(result, "r") as f:
        assert (f["points/status"][()] == 0).all()
        with xr.open_dataset(result, **opts) as root:
            assert root.attrs["schema"] == f.attrs["schema"] and root.attrs["schema"]
            assert root.attrs["schema_hash"] == f.attrs["schema_hash"]
        with xr.open_dataset(result, group="chaos", **opts) as ds:
            lam = f["chaos/lambda_max"][()]
            assert np.isfinite(lam).all()
            np.testing.assert_array_equal(ds["lambda_max"].values, lam)
            np.testing.assert_array_equal(ds["exponents"].values, f["chaos/exponents"][()])
            assert ds["lambda_max"].attrs["units"] == "1/period"
        with xr.open_dataset(result, group="points", **opts) as ds:
            for p in f["points"].attrs["parameters"]:
                np.testing.assert_array_equal(ds[p].values, f["points"][p][()], err_msg=p)
        with xr.open_dataset(result, group="bounds", **opts) as ds:
            cap = ds["hilbert_cap"]
            assert cap.dims == ("point", "region_size", "local_dim")
            np.testing.assert_array_equal(cap.values, f["bounds/hilbert_cap"][()])
            np.testing.assert_array_equal(cap["region_size"].values, f["bounds/region_size"][()])
            np.testing.assert_array_equal(cap["local_dim"].values, f["bounds/local_dim"][()])
            np.testing.assert_array_equal(cap["region_size"].values, [1, 2, 4])
            # a labelled lookup: row 13, ell = 4, N = 3
            assert cap.isel(point=13).sel(region_size=4, local_dim=3).item() == \
                f["bounds/hilbert_cap"][13, 2, 1]
        with xr.open_dataset(result, group="entanglement", **opts) as ds:
            np.testing.assert_array_equal(ds["t"].values, np.arange(7))
            np.testing.assert_array_equal(ds["region"].values, [0, 1, 2])
            np.testing.assert_array_equal(ds["region_size"].values, [1, 3, 2])
            assert ds["region_size"].dims == ("region",)
            assert ds["region_sites"].dims == ("region", "site_slot")
        with xr.open_dataset(result, group="entanglement/gaussian", **opts) as ds:
            s = ds["entropy"]
            assert s.dims == ("point", "region", "t")
            assert s.shape == (NPOINTS, 3, 7)
            np.testing.assert_array_equal(s.values, f["entanglement/gaussian/entropy"][()])
            assert np.isfinite(s.values).any()
        with xr.open_dataset(result, group="entanglement/stabilizer", **opts) as ds:
            s = ds["entropy"]
            assert s.dims == ("point", "local_dim", "region", "t")
            np.testing.assert_array_equal(s.values, f["entanglement/stabilizer/entropy"][()])
            np.testing.assert_array_equal(ds["local_dim"].values, [2, 3])
            assert ds["profile"].dims == ("point", "local_dim", "profile_t", "cut")
            np.testing.assert_array_equal(ds["profile_t"].values, [0, 2, 4, 6])
            np.testing.assert_array_equal(ds["profile"].values, f["entanglement/stabilizer/profile"][()])
        with xr.open_dataset(result, group="stats", **opts) as ds:
            assert ds.sizes["group"] == 1 and ds["count"].values.tolist() == [3]
            for copy, orig in [("region_size", "bounds/region_size"), ("local_dim", "bounds/local_dim"),
                               ("region", "entanglement/region"),
                               ("stabilizer_local_dim", "entanglement/stabilizer/local_dim")]:
                np.testing.assert_array_equal(ds[copy].values, f[orig][()], err_msg=copy)
            np.testing.assert_array_equal(ds["sites"].values, [10])
        with xr.open_dataset(result, group="stats/hilbert_cap", **opts) as ds:
            assert ds["mean"].dims == ("group", "region_size", "local_dim")
            np.testing.assert_array_equal(ds["mean"].values, f["stats/hilbert_cap/mean"][()])
        with xr.open_dataset(result, group="stats/stabilizer_slope", **opts) as ds:
            assert ds["mean"].dims == ("group", "stabilizer_local_dim", "region")
        with xr.open_dataset(result, group="stats/lambda_max", **opts) as ds:
            ens = f["points/sweep"][()] == 1
            assert ds["mean"].values[0] == pytest.approx(lam[ens].mean(), rel=1e-12)


def docs_example():
    text = (ROOT / "docs" / "xarray.md").read_text()
    blocks = [b for b in re.findall(r"```python\n(.*?)```", text, re.S) if "unstack" in b]
    assert len(blocks) == 1, "docs/xarray.md: expected one python block with unstack"
    code = blocks[0]
    for line in ('path = "scan.h5"\n', 'sweep_name = "scan"\n'):
        assert line in code, line
    return code


def exec_docs_example(path, sweep_name):
    code = docs_example().replace('path = "scan.h5"', f"path = {str(path)!r}")
    code = code.replace('sweep_name = "scan"', f"sweep_name = {sweep_name!r}")
    ns = {}
    exec(compile(code, "docs/xarray.md", "exec"), ns)
    return ns["lam"]


def test_docs_example(result):
    lam = exec_docs_example(result, "scan")
    assert lam.dims == ("sites", "boundary", "a", "b")
    assert lam.shape == (2, 2, 2, 3)
    np.testing.assert_array_equal(lam["sites"].values, [8, 12])
    np.testing.assert_array_equal(lam["boundary"].values, [0, 1])
    np.testing.assert_array_equal(lam["a"].values, [1, 2])
    np.testing.assert_array_equal(lam["b"].values, [1, 2, 3])
    assert np.isfinite(lam.values).all()
    with h5py.File(result, "r") as f:
        p = {k: f["points"][k][()] for k in ("sites", "boundary", "bond_a", "bond_b", "sweep")}
        ref = f["chaos/lambda_max"][()]
    rows = np.flatnonzero(p["sweep"] == 0)
    assert len(rows) == 24
    for i in rows:
        key = dict(sites=p["sites"][i], boundary=p["boundary"][i], a=p["bond_a"][i], b=p["bond_b"][i])
        assert lam.sel(**key).item() == ref[i], key
    # the open chain differs from the ring: a transposed axis would show
    assert lam.sel(sites=12, boundary=1, a=2, b=3).item() != lam.sel(sites=12, boundary=0, a=2, b=3).item()


def test_docs_example_refuses_a_seed_ensemble(result):
    # the "ens" sweep repeats (sites, boundary, a, b) once per seed
    with pytest.raises(AssertionError, match="occurs twice"):
        exec_docs_example(result, "ens")


def test_coordinates_do_not_depend_on_ranks(result, tmp_path, run_toral):
    if shutil.which("mpiexec") is None:
        pytest.skip("mpiexec not found")
    two = run(run_toral, tmp_path, ranks=2, name="r2.h5")
    groups1, info1 = walk(result)
    groups2, info2 = walk(two)
    assert groups1 == groups2
    assert info1 == info2  # same datasets, shapes, scales and attachments
    scales = sorted(p for p, i in info1.items() if i["scale"])
    assert len(scales) >= 15
    with h5py.File(result, "r") as a, h5py.File(two, "r") as b:
        assert a.attrs["ranks"] == 1 and b.attrs["ranks"] == 2
        for p in scales:
            assert a[p].dtype == b[p].dtype, p
            np.testing.assert_array_equal(a[p][()], b[p][()], err_msg=p)
            for k in ("NAME", "units", "meaning"):
                assert a[p].attrs.get(k) == b[p].attrs.get(k), (p, k)
        assert a.attrs["schema"] == b.attrs["schema"]
        assert a.attrs["schema_hash"] == b.attrs["schema_hash"]
    for g in sorted(groups1):
        with xr.open_dataset(result, group=g, engine="h5netcdf") as x1, \
             xr.open_dataset(two, group=g, engine="h5netcdf") as x2:
            assert dict(x1.sizes) == dict(x2.sizes), g
            assert sorted(x1.coords) == sorted(x2.coords), g
            for c in x1.coords:
                xr.testing.assert_identical(x1[c], x2[c])
            for v in x1.data_vars:
                if posixpath.join(g, v) not in TIMING:
                    xr.testing.assert_identical(x1[v], x2[v])

"""End-to-end tests of the exact entanglement dynamics ([entanglement]): a small
sweep of random circuits is run and every check is made on the HDF5 file."""
import json
import math
import os
import subprocess
import sys

import h5py
import numpy as np
import pytest
import scipy.io

from conftest import mpi_env, shard_and_merge
from test_cli import one_line_error, write

T = 24
STRIDE = 4
DIMS = [2, 3, 4]
# regions: {0}, {0, 1}, {0, 2} (two blocks of one site), {0, 1, 2}
REGIONS = [[0], [0, 1], [0, 2], [0, 1, 2]]

SWEEPS = """
[[sweep]]
name = "ring"
sites = [4, 6]
seeds = [1, 2]
[sweep.bond]
family = "shear2"
a = { draw = [-2, 2] }
b = { draw = [-2, 2] }

[[sweep]]
name = "chain"
sites = [3, 5]
boundary = "open"
seeds = [1, 2]
[sweep.bond]
family = "shear2"
a = { draw = [-2, 2] }
b = { draw = [-1, 1] }

[[sweep]]
name = "kicked"
sites = [4, 6]
boundary = ["periodic", "open"]
seeds = [3]
[sweep.bond]
family = "shear2"
a = { draw = [-1, 1] }
b = 1
[sweep.site]
family = "cat"
a = { draw = [0, 3] }
b = 1

[[sweep]]
name = "cat"
sites = 2
boundary = "open"
[sweep.bond]
matrix = [[2, 1], [1, 1]]
"""

ENT = f"""
[entanglement]
periods = {T}
regions = [1, 2, [2, 0], 3]
stabilizer_dims = {DIMS}
profile = true
profile_stride = {STRIDE}
"""

# Sites 0 and 1 in |p = 0>, site 2 in the line state of X Z (valid for every N).
INIT = """
[[entanglement.initial]]
sites = { from = 0, to = 1 }
stabilizer = "momentum"
[[entanglement.initial]]
sites = 2
stabilizer = [1, 1]
"""

POSITION_CLASS = {"ring", "chain", "cat"}  # no one-site layer, position bonds
CAT_RATE = 2 * math.log((3 + math.sqrt(5)) / 2)  # 1.9248473002384139


@pytest.fixture(scope="module")
def runs(tmp_path_factory, run_toral):
    """Two runs of the same sweep: all sites in the position state (1 rank),
    and with momentum / line sites (2 ranks)."""
    d = tmp_path_factory.mktemp("ent")
    out = {}
    for name, extra, ranks in (("position", "", 1), ("mixed", INIT, 2)):
        cfg = write(d, SWEEPS + ENT + extra, name=f"{name}.toml")
        h5 = d / f"{name}.h5"
        run_toral("run", cfg, "-o", h5, "-q", ranks=ranks, check=True)
        out[name] = (cfg, h5)
    return d, out


def load(h5):
    with h5py.File(h5, "r") as f:
        data = {}

        def visit(name, obj):
            if isinstance(obj, h5py.Dataset):
                data[name] = obj[()]

        f.visititems(visit)
        data["sweep_names"] = list(f.attrs["sweep_names"])
        data["units"] = {k: f[k].attrs["units"] for k in data if isinstance(data[k], np.ndarray) and k in f}
    return data


def cuts(sites, L, periodic):
    """Bonds (b, b+1 mod L) with one end in the region: L bonds on a ring, L-1 on a chain
    (kernels/model.hpp)."""
    inside = np.zeros(L, bool)
    inside[sites] = True
    bonds = L if periodic else L - 1
    return sum(inside[b] != inside[(b + 1) % L] for b in range(bonds))


def test_shapes_match_the_config(runs):
    _, out = runs
    d = load(out["position"][1])
    P = len(d["points/sites"])
    assert P == 4 + 4 + 4 + 1
    nR, nN, nt = len(REGIONS), len(DIMS), T + 1
    assert list(d["entanglement/t"]) == list(range(nt))
    assert list(d["entanglement/region_size"]) == [len(r) for r in REGIONS]
    assert d["entanglement/region_sites"].tolist() == [[0, -1, -1], [0, 1, -1], [0, 2, -1], [0, 1, 2]]
    assert list(d["entanglement/stabilizer/local_dim"]) == DIMS
    assert list(d["entanglement/stabilizer/profile_t"]) == list(range(0, T + 1, STRIDE))
    shapes = {
        "entanglement/cuts": (P, nR),
        "entanglement/lyapunov_rate": (P, nR),
        "entanglement/region_rate": (P, nR),
        "entanglement/wall_time": (P,),
        "entanglement/gaussian/entropy": (P, nR, nt),
        "entanglement/gaussian/radius": (P, nR, nt),
        "entanglement/gaussian/failures": (P, nR),
        "entanglement/gaussian/slope": (P, nR),
        "entanglement/gaussian/slope_over_lyapunov": (P, nR),
        "entanglement/gaussian/slope_over_region_rate": (P, nR),
        "entanglement/gaussian/saturation_value": (P, nR),
        "entanglement/gaussian/saturation_time": (P, nR),
        "entanglement/stabilizer/entropy": (P, nN, nR, nt),
        "entanglement/stabilizer/violations": (P, nN, nR),
        "entanglement/stabilizer/cap": (P, nN, nR),
        "entanglement/stabilizer/lightcone_rate": (P, nN, nR),
        "entanglement/stabilizer/slope_over_lightcone": (P, nN, nR),
        "entanglement/stabilizer/saturation_time": (P, nN, nR),
        "entanglement/stabilizer/profile": (P, nN, T // STRIDE + 1, 6 + 1),  # largest L = 6
    }
    for k, s in shapes.items():
        assert d[k].shape == s, k
    assert d["units"]["entanglement/stabilizer/entropy"] == "nats"
    assert d["units"]["entanglement/gaussian/slope"] == "nats/period"
    assert np.all(d["points/status"] == 0)


@pytest.mark.parametrize("run", ["position", "mixed"])
def test_stabilizer_curves_obey_the_hilbert_cap_and_the_light_cone(runs, run):
    # Strict bounds: S_A <= min(|A|, L-|A|) ln N for a pure state of N-level sites
    # (the entropy formula of Fattal et al., quant-ph/0406168), and a two-site gate
    # changes S_A by at most 2 ln N, once per cut and period (docs/bounds.md).
    _, out = runs
    d = load(out[run][1])
    L, periodic = d["points/sites"], d["points/boundary"] == 0
    S = d["entanglement/stabilizer/entropy"]
    nonzero = 0
    for i in range(len(L)):
        for k, sites in enumerate(REGIONS):
            fits = max(sites) < L[i]
            if not fits:
                assert np.all(np.isnan(S[i, :, k, :]))
                assert d["entanglement/cuts"][i, k] == -1
                assert np.all(d["entanglement/stabilizer/violations"][i, :, k] == -1)
                continue
            c = cuts(sites, L[i], periodic[i])
            assert d["entanglement/cuts"][i, k] == c
            for j, N in enumerate(DIMS):
                s = S[i, j, k]
                cap = min(len(sites), L[i] - len(sites)) * math.log(N)
                rate = 2 * c * math.log(N)
                assert d["entanglement/stabilizer/cap"][i, j, k] == pytest.approx(cap, abs=1e-12)
                assert d["entanglement/stabilizer/lightcone_rate"][i, j, k] == pytest.approx(rate, abs=1e-12)
                assert np.all(s <= cap + 1e-9), (i, k, N, s)
                assert np.all(s - s[0] <= rate * np.arange(T + 1) + 1e-9), (i, k, N, s)
                assert np.all(s >= -1e-12)
                assert d["entanglement/stabilizer/violations"][i, j, k] == 0
                assert d["entanglement/stabilizer/saturation_value"][i, j, k] == pytest.approx(s.max(), abs=1e-12)
                nonzero += s.max() > 0
    assert nonzero > 20  # the bounds were tested on curves that do grow


def test_position_states_under_position_circuits_stay_at_zero(runs):
    # |q = 0> is mapped to |M 0> = |0> by a position-class circuit (common practice).
    _, out = runs
    d = load(out["position"][1])
    names = [d["sweep_names"][s] for s in d["points/sweep"]]
    S = d["entanglement/stabilizer/entropy"]
    prof = d["entanglement/stabilizer/profile"]
    for i, name in enumerate(names):
        if name in POSITION_CLASS:
            assert np.all(np.nan_to_num(S[i]) == 0), name
            assert np.all(np.nan_to_num(prof[i]) == 0), name
        else:  # the one-site cat layer mixes q and p: entanglement grows
            assert np.nanmax(S[i]) > 0, name


def test_profile_agrees_with_the_block_regions(runs):
    # Two kernel paths: the all-cuts profile S([0, x)) at x = 1 and x = 3 is the
    # entropy of the blocks {0} and {0, 1, 2} (regions 0 and 3) at t = k * stride.
    _, out = runs
    d = load(out["mixed"][1])
    S, prof, L = d["entanglement/stabilizer/entropy"], d["entanglement/stabilizer/profile"], d["points/sites"]
    for i in range(len(L)):
        assert np.all(np.isnan(prof[i, :, :, L[i] + 1:]))  # NaN padded beyond x = L
        assert np.all(prof[i, :, :, 0] == 0) and np.all(np.abs(prof[i, :, :, L[i]]) < 1e-12)
        for x, k in ((1, 0), (3, 3)):
            if x < L[i]:
                np.testing.assert_allclose(prof[i, :, :, x], S[i, :, k, ::STRIDE], atol=1e-12)


def site_state(kind, N):
    if kind == "position":
        v = np.zeros(N, complex)
        v[0] = 1
        return v
    if kind == "momentum":
        return np.ones(N, complex) / math.sqrt(N)
    a, b = kind  # the line of X^a Z^b: an eigenvector of it (its eigenvalues are distinct)
    X = np.roll(np.eye(N), 1, axis=0)  # X|q> = |q+1>
    Z = np.diag(np.exp(2j * np.pi * np.arange(N) / N))  # Z|q> = w^q |q>
    W = np.linalg.matrix_power(X, a) @ np.linalg.matrix_power(Z, b)
    return np.linalg.eig(W)[1][:, 0]


def entropy(psi, L, N, sites):
    """von Neumann entropy (nats) of `sites` by numpy.linalg.svd (reference library)."""
    t = psi.reshape((N,) * L)
    rest = [s for s in range(L) if s not in sites]
    m = np.transpose(t, list(sites) + rest).reshape(N ** len(sites), -1)
    p = np.linalg.svd(m, compute_uv=False) ** 2
    p = p[p > 1e-14]
    return float(-(p * np.log(p)).sum())


def test_stabilizer_entropies_equal_explicit_state_vectors(runs, run_toral):
    # Position-class circuits act as U|q> = |M q mod N> (kernels/stabilizer.hpp);
    # M is exported by `toral point --matrix --position-block`. The state vector
    # is evolved explicitly and its entropies taken with numpy (reference library).
    d_, out = runs
    cfg, h5 = out["mixed"]
    d = load(h5)
    names = [d["sweep_names"][s] for s in d["points/sweep"]]
    S = d["entanglement/stabilizer/entropy"]
    checked = 0
    for i, name in enumerate(names):
        if name not in POSITION_CLASS:
            continue
        L = int(d["points/sites"][i])
        mtx = d_ / f"m{i}.mtx"
        run_toral("point", cfg, "--index", i, "--matrix", mtx, "--position-block", check=True)
        M = np.rint(scipy.io.mmread(str(mtx)).toarray()).astype(np.int64)
        kinds = ["momentum", "momentum", (1, 1)] + ["position"] * max(0, L - 3)
        for j, N in enumerate(DIMS):
            psi = np.array([1.0 + 0j])
            for s in range(L):
                psi = np.kron(psi, site_state(kinds[s], N))
            # index <-> digits (q_0 most significant, as np.kron builds it)
            digits = np.array(np.unravel_index(np.arange(N ** L), (N,) * L)).T
            image = np.ravel_multi_index(((digits @ M.T) % N).T, (N,) * L)
            for t in range(T + 1):
                if t in (0, 1, 2, 5, T):
                    for k, sites in enumerate(REGIONS):
                        if max(sites) < L:
                            assert S[i, j, k, t] == pytest.approx(entropy(psi, L, N, sites), abs=1e-9), (i, N, k, t)
                            checked += 1
                nxt = np.zeros_like(psi)
                nxt[image] = psi
                psi = nxt
    assert checked > 100


def test_cat_chain_gaussian_slope_is_the_cat_exponent(runs, run_toral):
    # Open two-site chain with the cat bond [[2, 1], [1, 1]], one-site region, vacuum:
    # S_A(t) grows at Lambda_1 = 2 ln((3 + sqrt 5)/2) (Bianchi, Hackl & Yokomizo,
    # JHEP 03 (2018) 025, with Arnold's cat exponent ln((3 + sqrt 5)/2)).
    _, out = runs
    cfg, h5 = out["position"]
    d = load(h5)
    i = [d["sweep_names"][s] for s in d["points/sweep"]].index("cat")
    assert abs(CAT_RATE - 1.9248473002384139) < 1e-15
    assert d["entanglement/gaussian/slope"][i, 0] == pytest.approx(CAT_RATE, abs=1e-9)
    assert d["entanglement/gaussian/slope_over_lyapunov"][i, 0] == pytest.approx(1.0, abs=1e-9)
    assert d["entanglement/lyapunov_rate"][i, 0] == pytest.approx(CAT_RATE, abs=1e-12)
    assert np.all(np.isnan(d["entanglement/gaussian/entropy"][i, 2:]))  # regions beyond L = 2
    # the whole chain {0, 1} is pure: S = 0 within its radius (certified)
    assert np.all(np.abs(d["entanglement/gaussian/entropy"][i, 1]) <= d["entanglement/gaussian/radius"][i, 1])
    # certified: every radius met the 1e-12 target, in every point and region
    rad = d["entanglement/gaussian/radius"]
    assert np.nanmax(rad) <= 1e-12
    f = d["entanglement/gaussian/failures"]
    assert np.all(f[f >= 0] == 0)
    # `toral point --json` carries the same values under the dataset paths
    rec = json.loads(run_toral("point", cfg, "--index", i, "--json", check=True).stdout)
    assert rec["/entanglement/gaussian/slope"][0] == pytest.approx(d["entanglement/gaussian/slope"][i, 0], abs=1e-15)
    assert rec["/entanglement/region_sites"] == REGIONS
    assert len(rec["/entanglement/stabilizer/entropy"]) == len(DIMS) * len(REGIONS) * (T + 1)
    text = run_toral("point", cfg, "--index", i, check=True).stdout
    assert "exact entanglement" in text and "1.92485" in text


def test_gaussian_slope_is_the_region_rate(runs):
    # Every region of every point, vacuum: ln vol(P_A S^t) <= S_A(t) <= ln vol(P_A S^t) + m (1 - ln 2),
    # m = min(|A|, L - |A|) (kernels/region_rate.hpp: Williamson's theorem, det sigma_A = prod nu_j^2), so
    # the late slope of S_A and the region rate (the late rate of ln vol, same window) differ by at most
    # the largest least-squares slope of a sequence confined to a band of that width. Ratios over the rates
    # follow the rule of docs/bounds.md (numpy computes them here).
    _, out = runs
    d = load(out["position"][1])
    L = d["points/sites"]
    rr, lam = d["entanglement/region_rate"], d["entanglement/lyapunov_rate"]
    slope = d["entanglement/gaussian/slope"]
    t = np.arange(T + 1)
    w = t[min((3 * T + 3) // 4, T - 1):]
    per_width = np.sum(np.clip(w - w.mean(), 0, None)) / np.sum((w - w.mean()) ** 2)

    def ratio(x, r):
        if np.isnan(x) or np.isnan(r):
            return math.nan
        if r > 0:
            return x / r
        return math.inf if x > 0 else (-math.inf if x < 0 else math.nan)

    checked = 0
    for i in range(len(L)):
        for k, sites in enumerate(REGIONS):
            m = min(len(sites), L[i] - len(sites))
            if max(sites) >= L[i] or m == 0:
                assert np.isnan(rr[i, k])  # does not fit, or the whole lattice
                continue
            assert abs(slope[i, k] - rr[i, k]) <= m * (1 - math.log(2)) * per_width + 1e-12, (i, k)
            for name, rate in (("slope_over_region_rate", rr[i, k]), ("slope_over_lyapunov", lam[i, k])):
                got, want = d["entanglement/gaussian/" + name][i, k], ratio(slope[i, k], rate)
                assert (np.isnan(got) and np.isnan(want)) or got == pytest.approx(want, rel=1e-15), (i, k, name)
            checked += 1
    assert checked > 30
    assert d["units"]["entanglement/region_rate"] == "nats/period"


def test_local_rate_is_the_central_difference_of_the_stored_curve(runs):
    # numpy differences (reference library) of the stored certified curve:
    # rate(t) = (S(t+h) - S(t-h)) / (2h), h = the attribute rate_window (1 by
    # default), NaN within h of the ends; its radius is the sum of the two
    # radii over 2h, so the exact difference quotient lies within it.
    _, out = runs
    path = out["position"][1]
    with h5py.File(path, "r") as f:
        h = int(f["entanglement"].attrs["rate_window"])
        assert h == 1
        S, r = f["entanglement/gaussian/entropy"][()], f["entanglement/gaussian/radius"][()]
        rate, rad = f["entanglement/gaussian/rate"][()], f["entanglement/gaussian/rate_radius"][()]
        assert f["entanglement/gaussian/rate"].attrs["units"] == "nats/period"
    assert rate.shape == S.shape
    want = np.full_like(S, np.nan)
    want[..., h:-h] = (S[..., 2 * h:] - S[..., :-2 * h]) / (2 * h)
    np.testing.assert_allclose(rate, want, rtol=1e-15, atol=1e-15, equal_nan=True)
    want_r = np.full_like(r, np.nan)
    want_r[..., h:-h] = (r[..., 2 * h:] + r[..., :-2 * h]) / (2 * h)
    np.testing.assert_allclose(rad, want_r, rtol=1e-15, equal_nan=True)
    assert np.isnan(rate[..., :h]).all() and np.isnan(rate[..., -h:]).all()
    assert np.isfinite(rate[..., h:-h]).sum() > 100


def test_local_rate_window_is_a_key(tmp_path, run_toral):
    # h = 3 on the cat chain: the central difference over [t-3, t+3] of the
    # stored curve (numpy), stated in the group attribute.
    cfg = write(tmp_path, '[[sweep]]\nsites = 8\nboundary = "open"\n[sweep.bond]\nmatrix = [[2,1],[1,1]]\n\n'
                '[entanglement]\nperiods = 12\nregions = [2]\noffset = 3\nrate_window = 3\n')
    out = tmp_path / "h.h5"
    run_toral("run", cfg, "-o", out, "-q", check=True)
    with h5py.File(out, "r") as f:
        assert f["entanglement"].attrs["rate_window"] == 3
        S, rate = f["entanglement/gaussian/entropy"][0, 0], f["entanglement/gaussian/rate"][0, 0]
    np.testing.assert_allclose(rate[3:-3], (S[6:] - S[:-6]) / 6, rtol=1e-15)
    assert np.isnan(rate[:3]).all() and np.isnan(rate[-3:]).all()


def test_shards_and_merge_keep_entanglement(runs, run_toral):
    # Shards are read back (read_results) and rewritten by `merge`: the
    # /entanglement datasets, the NaN padding of the profile included, survive.
    d_, out = runs
    cfg, h5 = out["mixed"]
    merged = shard_and_merge(run_toral, cfg, d_)
    a, b = load(h5), load(merged)
    keys = [k for k in a if k.startswith("entanglement/") and k != "entanglement/wall_time"]
    # 32 datasets (gaussian/rate, rate_radius and the open-chain transient fields included) and the axes region, site_slot and stabilizer/cut
    assert len(keys) == 35 and sorted(keys) == sorted(k for k in b if k.startswith("entanglement/") and k != "entanglement/wall_time")
    for k in keys:
        np.testing.assert_array_equal(a[k], b[k], err_msg=k)


BAD = {
    "bad_N": ("stabilizer_dims = [2, 1]\n", "c.toml:9: entanglement.stabilizer_dims: N = 1"),
    "bad_line": ('stabilizer_dims = [2]\n[[entanglement.initial]]\nsites = 0\nstabilizer = [2, 4]\n',
                 "c.toml:12: entanglement.initial[0].stabilizer"),
    "bad_squeeze": ('[[entanglement.initial]]\nsites = 0\ngaussian = "squeezed"\nsqueeze = "-3/2"\n',
                    "c.toml:12: entanglement.initial[0].squeeze"),
    "region_too_big": ("", "c.toml:8: entanglement.regions[0]: sites 0..4 need L >= 5"),
    "unknown_key": ("period = 3\n", "c.toml:9: entanglement.period: unknown key"),
    "bad_radius": ("radius = 0.0\n", "c.toml:9: entanglement.radius: must be in (0, 1e-3]"),
    "bad_precision": ("max_precision_bits = 32\n", "c.toml:9: entanglement.max_precision_bits: must be in 64..1048576"),
    "bad_rate_window": ("rate_window = 0\n", "c.toml:9: entanglement.rate_window: 0 is outside 1..10^6"),
}


@pytest.mark.parametrize("case", sorted(BAD))
def test_bad_entanglement_config_is_one_located_line(tmp_path, run_toral, case):
    extra, fragment = BAD[case]
    text = ("[[sweep]]\nsites = 4\n[sweep.bond]\nmatrix = [[2,1],[1,1]]\n\n[entanglement]\nperiods = 3\n"
            "regions = [5]\n" if case == "region_too_big" else
            "[[sweep]]\nsites = 4\n[sweep.bond]\nmatrix = [[2,1],[1,1]]\n\n[entanglement]\nperiods = 3\n"
            "regions = [1]\n") + extra
    cfg = write(tmp_path, text)
    out = tmp_path / "out.h5"
    one_line_error(run_toral("run", cfg, "-o", out), fragment)
    one_line_error(run_toral("check", cfg), fragment)
    assert not out.exists()


UNITS = {"B": 1, "KiB": 2**10, "MiB": 2**20, "GiB": 2**30, "TiB": 2**40}


def check_table(stdout, memory=False):
    """The cost rows of `toral check`: {(sweep, L, boundary): (s/point, entangle s)} or, with memory,
    (memory in bytes, entangle s) (columns: sweep, L, boundary, method, points, s/point, memory as a
    number and a unit, Gflop, entangle s)."""
    rows, header = {}, None
    for line in stdout.splitlines():
        f = line.split()
        if f[:2] == ["sweep", "L"]:
            header = f
        elif header and len(f) == 10 and f[1].isdigit():
            first = float(f[6]) * UNITS[f[7]] if memory else float(f[5])
            rows[(f[0], int(f[1]), f[2])] = (first, float(f[9]))
    return header, rows


def kicked_ring(L, kick):
    """A clean shear ring (a = b = 1) with a one-site cat kick C(kick, 1)."""
    return (f'[[sweep]]\nname = "kicked"\nsites = {L}\n[sweep.bond]\nfamily = "shear2"\na = 1\nb = 1\n'
            f'[sweep.site]\nfamily = "cat"\na = {kick}\nb = 1\n')


def test_check_estimates_the_entanglement_cost(tmp_path, run_toral):
    # The curves are probed on each class's own first point: the estimate is
    # there, finite and positive, and grows with T (exact integers grow with t,
    # so ten times the periods cost far more than twice as much; a wide margin,
    # not a timing claim).
    text = kicked_ring(16, 2) + """
[entanglement]
periods = {T}
regions = [4]
gaussian = true
stabilizer_dims = [2]
"""
    est = {}
    for T in (30, 300):
        p = run_toral("check", write(tmp_path, text.replace("{T}", str(T)), f"c{T}.toml"), check=True)
        header, rows = check_table(p.stdout)
        assert header is not None and header[-2:] == ["entanglement", "s"], p.stdout
        (spectrum_s, ent_s), = rows.values()
        assert math.isfinite(ent_s) and ent_s > 0
        est[T] = ent_s
    assert est[300] > 2 * est[30], est
    # Without the table there is no such column.
    p = run_toral("check", write(tmp_path, text.split("[entanglement]")[0], "plain.toml"), check=True)
    assert "entangle" not in p.stdout


_PEAK_RSS = """
import os, subprocess, sys
p = subprocess.Popen(sys.argv[1:], stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
_, status, ru = os.wait4(p.pid, 0)
sys.stderr.write(p.stderr.read().decode())
print(ru.ru_maxrss)
sys.exit(os.waitstatus_to_exitcode(status))
"""


def peak_rss_bytes(cmd):
    """Peak resident memory of one child process (os.wait4 gives that child's own rusage; Linux: KiB).
    The child is started from a fresh, small interpreter: Linux keeps a process's peak across exec,
    so a child forked straight from this (possibly large) test process would report at least the
    test process's own size."""
    p = subprocess.run([sys.executable, "-c", _PEAK_RSS, *map(str, cmd)], capture_output=True, text=True,
                       env=mpi_env())
    assert p.returncode == 0, p.stderr
    return int(p.stdout.split()[-1]) * 1024


def test_check_counts_the_kernels_memory_and_refuses_what_cannot_fit(tmp_path, run_toral, toral):
    # An odd N keeps the L x 2L generator rows in 8-byte words (64 MiB at L = 2048), far more than the
    # curves themselves; check must see it (within a factor of two of the measured peak of the same point
    # over a run without [entanglement]: a wide margin, the allocator and libraries move the peak) and
    # refuse a rank memory that cannot hold it, with the entanglement diagnostic named.
    base = kicked_ring(2048, 3) + '[spectrum]\nmethod = "krylov"\n'
    ent = "[entanglement]\nperiods = 4\nregions = [[0, 5]]\ngaussian = false\nstabilizer_dims = [3]\n"
    cfg, plain = write(tmp_path, base + ent, "m.toml"), write(tmp_path, base, "m0.toml")
    header, rows = check_table(run_toral("check", cfg, check=True).stdout, memory=True)
    (estimate, _), = rows.values()
    measured = peak_rss_bytes([toral, "run", cfg, "-o", tmp_path / "m.h5", "-q"]) - \
        peak_rss_bytes([toral, "run", plain, "-o", tmp_path / "m0.h5", "-q"])
    assert measured > 32 * 2**20, measured  # the kernel really holds tens of MiB
    assert measured / 2 < estimate < 2 * measured + 16 * 2**20, (estimate, measured)
    p = run_toral("check", cfg, "--memory-per-rank", "0.03")
    one_line_error(p, "mostly the diagnostics (entanglement)")


def test_ensemble_stats_of_the_curves_match_numpy(runs):
    # Points differing only in the seed form a group; /stats summarises the
    # curves' slopes, ratios and saturation per region (and N) over the group's
    # ok points, like every other quantity. numpy is the reference library.
    _, out = runs
    with h5py.File(out["mixed"][1]) as f:
        names = [n for n in f["points"].attrs["parameters"] if n != "seed"]
        pts = {n: f["points"][n][()] for n in names}
        seed, status = f["points/seed"][()], f["points/status"][()]
        e, st = f["entanglement"], f["stats"]
        columns = {
            "entanglement_lyapunov_rate": e["lyapunov_rate"][()],
            "gaussian_slope": e["gaussian/slope"][()],
            "gaussian_slope_over_lyapunov": e["gaussian/slope_over_lyapunov"][()],
            "entanglement_region_rate": e["region_rate"][()],
            "gaussian_slope_over_region_rate": e["gaussian/slope_over_region_rate"][()],
            "stabilizer_slope": e["stabilizer/slope"][()],
            "stabilizer_slope_over_lightcone": e["stabilizer/slope_over_lightcone"][()],
            "stabilizer_saturation_value": e["stabilizer/saturation_value"][()],
            "stabilizer_saturation_time": e["stabilizer/saturation_time"][()],
        }
        for name in columns:
            assert name in st, name
        assert st["stabilizer_slope/mean"].shape[1:] == (len(DIMS), len(REGIONS))
        checked = 0
        for g in range(len(st["count"][()])):
            sel = (seed != np.iinfo(np.int64).min) & (status == 0)
            for n in names:
                sel &= pts[n] == st[n][()][g]
            if sel.sum() < 2:
                continue
            for name, data in columns.items():
                v = data[sel]
                with np.errstate(invalid="ignore"):
                    np.testing.assert_allclose(st[f"{name}/mean"][g], v.mean(axis=0), rtol=1e-12, atol=1e-14,
                                               err_msg=name)
                    np.testing.assert_allclose(st[f"{name}/std"][g], v.std(axis=0, ddof=1), rtol=1e-10, atol=1e-13,
                                               err_msg=name)
            checked += 1
        assert checked > 0

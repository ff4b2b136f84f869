"""The Bloch band structure ([bands] -> /bands) end to end.

References, independent of toral's Bloch code: the period matrix S of each
ring is assembled here with numpy from the gate matrices of the config
(bond gate A on the positions (q_a, q_b) of a bond, A^{-T} on its momenta, a
one-site gate g on (q_i, p_i); brick-wall even bonds (2j, 2j+1), odd bonds
(2j+1, 2j+2 mod L); the product's layer order and the orientation of A do
not change the spectrum, which is all that is compared). numpy.linalg.eigvals
of S is the dense diagonalisation the ring bands must equal as a multiset;
numpy.linalg.eigvals of the Bloch symbol M(k) = sum_d S[cell 0, cell d]
e^{i k d} (block-circulant S, cells of two sites) gives the bulk bands."""
import json
import math
import pathlib
import subprocess

import h5py
import numpy as np
import pytest

ROOT = pathlib.Path(__file__).resolve().parents[2]

# Position gates (2x2 on the positions of a bond) and one-site kicks, all of
# determinant 1: elliptic, mixed and hyperbolic band structures.
GATES = [
    ("cat", [[2, 1], [1, 1]], None),                  # hyperbolic everywhere
    ("mixed", [[1, 2], [-2, -3]], None),              # elliptic on [0, pi/3], hyperbolic beyond
    ("fib", [[1, 1], [1, 0]], None),                  # det -1: a position gate toral accepts
    ("shear_kicked", [[1, 1], [0, 1]], [[2, 1], [1, 1]]),  # general 4x4 blocks (one-site layer)
    ("rot_kicked", [[0, 1], [-1, 0]], [[1, 1], [0, 1]]),
]
GRID = 13


def config(sites=(8, 12), boundary=("periodic",)):
    text = 'title = "bands test"\n'
    for name, a, g in GATES:
        text += (f'[[sweep]]\nname = "{name}"\nsites = {list(sites)}\n'
                 f'boundary = {json.dumps(list(boundary))}\n[sweep.bond]\nmatrix = {a}\n')
        if g is not None:
            text += f"[sweep.site]\nmatrix = {g}\n"
    return text + f"[bands]\ngrid = {GRID}\n"


def period_matrix(A, g, L):
    """S on (q0, p0, q1, p1, ...) of a periodic ring of L sites."""
    A = np.array(A, float)
    AiT = np.linalg.inv(A).T
    def layer(bonds):
        S = np.eye(2 * L)
        for a, b in bonds:
            S[np.ix_([2 * a, 2 * b], [2 * a, 2 * b])] = A
            S[np.ix_([2 * a + 1, 2 * b + 1], [2 * a + 1, 2 * b + 1])] = AiT
        return S
    even = layer([(2 * j, 2 * j + 1) for j in range(L // 2)])
    odd = layer([(2 * j + 1, (2 * j + 2) % L) for j in range(L // 2)])
    S = odd @ even
    if g is not None:
        site = np.eye(2 * L)
        for i in range(L):
            site[2 * i:2 * i + 2, 2 * i:2 * i + 2] = np.array(g, float)
        S = site @ S
    return S


def symbol_exponents(S, L, k):
    """Exponents of the Bloch symbol M(k) = sum_d S[cell 0, cell d] e^{ikd}."""
    n = L // 2
    M = np.zeros((4, 4), complex)
    for d in range(n):
        dd = d if d <= n // 2 else d - n
        M += S[0:4, 4 * d:4 * d + 4] * np.exp(1j * k * dd)
    return np.sort(np.log(np.abs(np.linalg.eigvals(M))))[::-1]


@pytest.fixture(scope="module")
def result(tmp_path_factory, run_toral):
    d = tmp_path_factory.mktemp("bands")
    cfg = d / "b.toml"
    cfg.write_text(config(boundary=("periodic", "open")))
    out = d / "b.h5"
    run_toral("run", cfg, "-o", out, "-q", check=True)
    return cfg, out


def points(f):
    """(row, sweep name, L, boundary) of each point."""
    names = [n.decode() if isinstance(n, bytes) else n for n in f.attrs["sweep_names"]]
    sw, L, bc = f["points/sweep"][()], f["points/sites"][()], f["points/boundary"][()]
    return [(i, names[sw[i]], int(L[i]), int(bc[i])) for i in range(len(sw))]


def gate(name):
    return next((a, g) for n, a, g in GATES if n == name)


def test_ring_bands_are_the_dense_spectrum(result):
    # As a multiset, the ring bands equal numpy's eigenvalues of the dense S
    # (1e-6: numpy scatters the eigenvalues of Jordan blocks on the circle by
    # ~sqrt(eps); toral's exact zeros are exactly 0.0), and equal toral's own
    # /chaos/exponents of the Bloch points bit for bit (one computation).
    _, out = result
    with h5py.File(out, "r") as f:
        checked = 0
        for i, name, L, bc in points(f):
            rk = f["bands/ring_k"][i]
            if bc != 0:  # open chains have no ring momenta: padding
                assert np.isnan(rk).all()
                assert (f["bands/ring_class"][i] == -1).all()
                continue
            n = L // 2
            assert np.isnan(rk[n:]).all() and not np.isnan(rk[:n]).any()
            np.testing.assert_allclose(rk[:n], 2 * np.pi * np.arange(n) / n, atol=1e-15)
            ex = f["bands/ring_exponents"][i][:n]
            ours = np.sort(ex.ravel())[::-1]
            a, g = gate(name)
            ref = np.sort(np.log(np.abs(np.linalg.eigvals(period_matrix(a, g, L)))))[::-1]
            np.testing.assert_allclose(ours, ref, atol=1e-6, rtol=0, err_msg=f"{name} L={L}")
            if f["points/method"][i] == 1:  # bloch
                k = f["chaos/exponent_count"][i]
                np.testing.assert_array_equal(ours[:k], f["chaos/exponents"][i][:k])
            # classes: hyperbolic iff a positive exponent (numpy: > 1e-6)
            cls = f["bands/ring_class"][i][:n]
            top = np.array([symbol_exponents(period_matrix(a, g, L), L, kk)[0] for kk in rk[:n]])
            np.testing.assert_array_equal(cls == 2, top > 1e-6, err_msg=f"{name} L={L}")
            assert ((cls == 2) == (ex[:, 0] > 0)).all()
            checked += 1
        assert checked == 2 * len(GATES)


def test_bulk_bands_are_the_bloch_symbol(result):
    # The bulk curves against numpy eigenvalues of the Bloch symbol at the
    # grid momenta, for every boundary (the bulk depends on the gates only).
    _, out = result
    with h5py.File(out, "r") as f:
        k = f["bands/k"][()]
        np.testing.assert_allclose(k, np.pi * np.arange(GRID) / (GRID - 1), atol=1e-15)
        for i, name, L, bc in points(f):
            a, g = gate(name)
            S = period_matrix(a, g, 12)  # a ring carrying momenta 0, pi/3, ...: any L gives the symbol
            bulk = f["bands/bulk_exponents"][i]
            err = f["bands/bulk_errors"][i]
            for j, kk in enumerate(k):
                ref = symbol_exponents(S, 12, kk)
                np.testing.assert_allclose(bulk[j], ref, atol=1e-6 + 2 * err[j].max(), rtol=0,
                                           err_msg=f"{name} k={kk}")
            cls = f["bands/bulk_class"][i]
            assert ((cls == 2) == (bulk[:, 0] > 0)).all(), name
            assert f["bands/exact"][i] == 1


def test_closed_form_arcs_and_classes(result):
    # Worked example (tests/test_bloch.cpp, Bands.ClosedFormEllipticThenHyperbolic):
    # A = [[1, 2], [-2, -3]] has tau(k) = -6 + 8 cos k: elliptic on [0, pi/3],
    # hyperbolic on (pi/3, pi], kinks at 0 and pi/3; exponent arccosh(|tau|/2).
    _, out = result
    with h5py.File(out, "r") as f:
        rows = [i for i, name, L, bc in points(f) if name == "mixed"]
        assert rows
        for i in rows:
            lo, hi = f["bands/arc_lo"][i], f["bands/arc_hi"][i]
            assert np.isnan(lo[2:]).all()
            np.testing.assert_allclose(lo[:2], [0, np.pi / 3], atol=1e-14)
            np.testing.assert_allclose(hi[:2], [np.pi / 3, np.pi], atol=1e-14)
            assert f["bands/arc_class"][i][:2].tolist() == [0, 2]
            assert f["bands/arc_on_circle"][i][:2].tolist() == [4, 0]
            kinks = f["bands/kinks"][i]
            np.testing.assert_allclose(kinks[:2], [0, np.pi / 3], atol=1e-14)
            assert np.isnan(kinks[2:]).all()
            assert f["bands/elliptic_fraction"][i] == pytest.approx(1 / 3, abs=1e-14)
            k = f["bands/k"][()]
            tau = -6 + 8 * np.cos(k)
            lam = np.where(np.abs(tau) > 2, np.arccosh(np.maximum(np.abs(tau), 2) / 2), 0.0)
            np.testing.assert_allclose(f["bands/bulk_exponents"][i][:, 0], lam, atol=1e-12)
            cls = f["bands/bulk_class"][i]
            # grid k = pi j / 12: k = 0 and k = pi/3 (j = 4) are the kinks
            want = [1 if j in (0, 4) else 0 if j < 4 else 2 for j in range(GRID)]
            assert cls.tolist() == want


def test_no_bands_for_drawn_or_redrawn_gates(tmp_path, run_toral):
    # Disordered bonds are not translation-invariant: the whole /bands row is
    # padding, the point itself is ok. A bad [bands] key is a located error.
    cfg = tmp_path / "d.toml"
    cfg.write_text('[[sweep]]\nname = "dis"\nsites = 8\nseeds = 1\n[sweep.bond]\nfamily = "shear2"\n'
                   'a = { draw = [1, 2] }\nb = 1\n[bands]\ngrid = 5\n')
    out = tmp_path / "d.h5"
    run_toral("run", cfg, "-o", out, "-q", check=True)
    with h5py.File(out, "r") as f:
        assert f["points/status"][0] == 0
        assert np.isnan(f["bands/bulk_exponents"][0]).all()
        assert np.isnan(f["bands/ring_k"][0]).all()
        assert f["bands/exact"][0] == -1
    bad = tmp_path / "bad.toml"
    bad.write_text('[[sweep]]\nname = "a"\nsites = 8\n[sweep.bond]\nmatrix = [[2, 1], [1, 1]]\n[bands]\ngrid = 1\n')
    p = run_toral("run", bad, "-o", tmp_path / "bad.h5")
    assert p.returncode == 2
    lines = p.stderr.strip().splitlines()
    assert len(lines) == 1 and "bad.toml:7" in lines[0] and "bands.grid" in lines[0], p.stderr
    assert not (tmp_path / "bad.h5").exists()
    bad.write_text('[[sweep]]\nname = "a"\nsites = 8\n[sweep.bond]\nmatrix = [[2, 1], [1, 1]]\n[bands]\nrings = true\n')
    p = run_toral("run", bad, "-o", tmp_path / "bad.h5")
    assert p.returncode == 2 and "bands.rings" in p.stderr and "unknown key" in p.stderr


def test_ranks_and_json_and_plot(tmp_path, result, run_toral):
    # 1 and 2 ranks write identical /bands datasets; `toral point --json` has
    # them under their paths; the analysis script plots a point and prints its arcs.
    cfg, out = result
    two = tmp_path / "two.h5"
    run_toral("run", cfg, "-o", two, "-q", ranks=2, check=True)
    with h5py.File(out, "r") as a, h5py.File(two, "r") as b:
        names = []
        a["bands"].visit(lambda n: names.append(n) if isinstance(a["bands"][n], h5py.Dataset) else None)
        assert len(names) > 10
        for n in names:
            np.testing.assert_array_equal(a["bands"][n][()], b["bands"][n][()], err_msg=n)
        row = next(i for i, name, L, bc in points(a) if name == "mixed" and bc == 0)
        want = a["bands/ring_exponents"][row]
    p = run_toral("point", cfg, "--index", row, "--json", check=True)
    rec = json.loads(p.stdout)
    n = int(np.sum(~np.isnan(want[:, 0])))
    np.testing.assert_array_equal(np.array(rec["/bands/ring_exponents"]), want[:n].ravel())
    assert rec["/bands/k"] == pytest.approx(list(np.pi * np.arange(GRID) / (GRID - 1)), abs=1e-15)
    png = tmp_path / "bands.png"
    r = subprocess.run(["/usr/bin/python3", str(ROOT / "analysis" / "toral_bands.py"), str(out), "--point", str(row),
                        "--table", "-o", str(png)], capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    assert png.stat().st_size > 10000
    assert "elliptic" in r.stdout and "hyperbolic" in r.stdout and "kinks (parabolic): 0.000000 1.047198" in r.stdout
    r = subprocess.run(["/usr/bin/python3", str(ROOT / "analysis" / "toral_bands.py"), str(out), "--point", "999",
                        "--table"], capture_output=True, text=True)
    assert r.returncode == 2 and len(r.stderr.strip().splitlines()) == 1 and "outside" in r.stderr

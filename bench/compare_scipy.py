#!/usr/bin/env python3
"""Side-by-side benchmark: toral's distributed methods against the equivalent
scipy.sparse.linalg.eigs script on the same matrices, in one run.

The matrices are exported by toral itself (`toral point --matrix
--position-block`), so both sides diagonalise exactly the same integers. The
result table goes to docs/performance.md (with the machine it ran on).

Run: /usr/bin/python3 bench/compare_scipy.py [--toral build/toral] [--quick]
"""
import argparse
import multiprocessing
import os
import pathlib
import platform
import re
import subprocess
import sys
import tempfile
import time

import h5py
import numpy as np
import scipy
import scipy.io
import scipy.sparse.linalg as sla

from bench_common import env

ROOT = pathlib.Path(__file__).resolve().parents[1]

# scipy's eigs on the L = 1e6 disordered ring where the project's targets were set (its requirements, issue 3).
REFERENCE_SCIPY_S = 58.4

DISORDERED = """
[[sweep]]
name = "dis"
sites = {L}
boundary = "periodic"
seeds = [1]
[sweep.bond]
family = "shear2"
a = {{ draw = [-2, 2] }}
b = {{ draw = [-2, 2] }}
[spectrum]
method = "krylov"
[spectrum.krylov]
count = 16
ranks_per_point = {ranks}
"""

CLEAN_OPEN = """
[[sweep]]
name = "clean"
sites = {L}
boundary = "open"
[sweep.bond]
matrix = [[2, 1], [1, 1]]
[spectrum]
method = "krylov"
bulk_limit = true
[spectrum.krylov]
count = 1
tolerance = 1e-12
ranks_per_point = {ranks}
"""



def toral_run(toral, text, work, name, ranks):
    cfg = work / f"{name}.toml"
    cfg.write_text(text)
    out = work / f"{name}.h5"
    cmd = ["/usr/bin/time", "-v", "mpiexec", "-n", str(ranks), toral, "run", str(cfg), "-o", str(out), "-q",
           "--overwrite"]
    t0 = time.perf_counter()
    p = subprocess.run(cmd, capture_output=True, text=True, env=env())
    wall = time.perf_counter() - t0
    if p.returncode != 0:
        sys.exit(f"toral failed: {p.stderr}")
    rss = int(re.search(r"Maximum resident set size \(kbytes\): (\d+)", p.stderr).group(1)) / 1024
    with h5py.File(out) as f:
        solver = float(f["chaos/solver/wall_time"][0])
        ex = f["chaos/exponents"][0]
        status = int(f["points/status"][0])
        res = float(f["chaos/solver/residual"][0])
        cl = int(f["chaos/solver/cluster_count"][0])
        its = int(f["chaos/solver/iterations"][0])
        lim = float(f["limit/lambda_max"][0]) if "limit" in f else float("nan")
    if status != 0:
        sys.exit(f"toral point failed: status {status}")
    return dict(wall=wall, solver=solver, rss=rss, exponents=ex[np.isfinite(ex)], residual=res, cluster=cl,
                bulk=lim, cfg=cfg, iterations=its)


def export(toral, cfg, work, name):
    mtx = work / f"{name}.mtx"
    subprocess.run([toral, "point", str(cfg), "--index", "0", "--matrix", str(mtx), "--position-block"],
                   check=True, capture_output=True, env=env())
    return scipy.io.mmread(str(mtx)).tocsr().astype(float)


def scipy_top(m, k):
    """Top k exponents of S = M (+) M^-T: spec(S) = spec(M) u 1/spec(M), so the
    largest moduli of M (eigs, which='LM') and the smallest (shift-invert at
    0, i.e. the largest of M^-1) are merged, as toral does."""
    t0 = time.perf_counter()
    big = sla.eigs(m, k=k, which="LM", return_eigenvectors=False, tol=1e-12)
    small = sla.eigs(m, k=k, sigma=0, which="LM", return_eigenvectors=False, tol=1e-12)
    dt = time.perf_counter() - t0
    ex = np.concatenate([np.log(np.abs(big)), -np.log(np.abs(small))])
    return np.sort(ex)[::-1][:k], dt


# Accuracy the scipy side is asked for on the clean chain: issue 3's "lambda_max to 1e-10". toral is asked
# for 1e-12 (CLEAN_OPEN), a tighter tolerance than scipy gets here.
CLEAN_TOL = 1e-10
# Generic target for the clean chain: POWER_STEPS normalised power steps from a random start (ARPACK's own
# default start), the norm-ratio estimate ||M x|| / ||x||, and sigma = POWER_MARGIN x that estimate.
# Shift-invert eigs returns the eigenvalue nearest sigma, so sigma must lie above lambda_max; power steps
# approach the top from below, and on this clustered top they do so slowly (measured on the exported
# matrices: 40 steps leave the estimate 0.6% low at L = 1e4 and at L = 1e5). sigma = the estimate itself,
# or 1.001 x it, lies inside the band and eigs then returns an interior eigenvalue (lambda off by 5e-3 at
# L = 1e4), so 1.01 is the smallest round margin that gives the right value. The guaranteed upper bound,
# the Gershgorin / infinity-norm bound 7, is the other textbook choice; it is slower (13 s instead of 1.1 s
# at L = 1e4), so it is not used.
POWER_STEPS = 40
POWER_MARGIN = 1.01


def power_estimate(m, steps=POWER_STEPS, seed=0):
    x = np.random.default_rng(seed).standard_normal(m.shape[0])
    x /= np.linalg.norm(x)
    est = 0.0
    for _ in range(steps):
        y = m @ x
        est = float(np.linalg.norm(y))
        x = y / est
    return est


def scipy_shift_invert(m, sigma):
    """lambda_max = log of the top modulus of M by one shift-invert eigs. That is lambda_max of S = M (+) M^-T
    only because spec(M) of this gate is closed under mu -> 1/mu (checked by inverse_closure)."""
    t0 = time.perf_counter()
    vals = sla.eigs(m, k=1, sigma=sigma, which="LM", return_eigenvectors=False, tol=CLEAN_TOL)
    dt = time.perf_counter() - t0
    return float(np.max(np.log(np.abs(vals)))), dt


def scipy_generic(m):
    """The script a user without toral's band edge writes: a power-step estimate, then shift-invert there.
    The power steps are part of the timed script."""
    t0 = time.perf_counter()
    est = power_estimate(m)
    lam, _ = scipy_shift_invert(m, POWER_MARGIN * est)
    return lam, time.perf_counter() - t0, est


def _child(conn, fn, args):
    try:
        conn.send(("ok", fn(*args)))
    except Exception as e:  # recorded in the table, not hidden
        conn.send(("error", f"{type(e).__name__}: {e}"))


def capped(cap, fn, *args):
    """fn(*args) in a forked process (the matrix is inherited, not copied through a pipe); ("timeout", cap)
    if it has not returned within cap seconds, so a slow eigs cannot hang the bench."""
    ctx = multiprocessing.get_context("fork")
    recv, send = ctx.Pipe(duplex=False)
    p = ctx.Process(target=_child, args=(send, fn, args))
    p.start()
    out = recv.recv() if recv.poll(cap) else ("timeout", cap)
    if p.is_alive():
        p.terminate()
    p.join()
    return out


CLOSURE_L = 200


def inverse_closure(toral, cfg_text, work, L=CLOSURE_L):
    """Relative difference between max|mu| and max 1/|mu| over spec(M), dense numpy eigvals at a small L.
    If it is at rounding level, the top of spec(M) is the top of spec(S) = spec(M) u 1/spec(M)."""
    t = work / "closure.toml"
    t.write_text(cfg_text.format(L=L, ranks=1))
    mod = np.abs(np.linalg.eigvals(export(toral, t, work, "closure").toarray()))
    return abs(mod.max() - 1 / mod.min()) / mod.max()


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--toral", default=str(ROOT / "build" / "toral"))
    ap.add_argument("--ranks", type=int, default=2)
    ap.add_argument("--quick", action="store_true", help="smaller sizes (a smoke run, not the table)")
    ap.add_argument("--out", default=str(ROOT / "docs" / "performance.md"))
    ap.add_argument("--scipy-cap", type=float, default=300.0,
                    help="wall-clock cap in seconds on each clean-chain scipy script (reported, not a ratio)")
    a = ap.parse_args()
    big = 10**5 if a.quick else 10**6
    clean_L = 10**4 if a.quick else 10**5
    rows, lines = [], []
    with tempfile.TemporaryDirectory() as d:
        work = pathlib.Path(d)
        # 1. disordered ring, top 16
        t = toral_run(a.toral, DISORDERED.format(L=big, ranks=a.ranks), work, "dis", a.ranks)
        m = export(a.toral, t["cfg"], work, "dis")
        ref, dt = scipy_top(m, 16)
        k = min(len(ref), len(t["exponents"]))
        agree = float(np.max(np.abs(ref[:k] - t["exponents"][:k])))
        rows.append(("disordered ring, top 16", big, t["wall"], t["solver"], t["rss"], dt, agree))
        # 2. clean open chain of [[2,1],[1,1]], lambda_max: one toral run, two scipy scripts
        t = toral_run(a.toral, CLEAN_OPEN.format(L=clean_L, ranks=a.ranks), work, "clean", a.ranks)
        m = export(a.toral, t["cfg"], work, "clean")
        lam = t["exponents"][0]
        toral_cols = (clean_L, t["wall"], t["solver"], t["rss"])
        closure = inverse_closure(a.toral, CLEAN_OPEN, work)
        lines.append(f"clean open chain: toral reported {t['cluster']} values within the cluster tolerance of "
                     f"lambda_max (a band edge). The scipy side runs one eigs on M; for this gate that is "
                     f"lambda_max of S, since spec(M) is closed under mu -> 1/mu: at L = {CLOSURE_L} numpy's eigvals of M "
                     f"give max|mu| and max 1/|mu| equal to {closure:.1e} relative.")
        est = power_estimate(m)  # for the report; the generic script recomputes it inside its timing
        lines.append(f"generic target: {POWER_STEPS} power steps estimate e^lambda_max as {est:.6f} "
                     f"({est / np.exp(lam) - 1:.1e} relative to toral's value), sigma = {POWER_MARGIN} x that.")
        sigma = float(np.exp(t["bulk"])) * (1 + 1e-8)  # just beyond the bulk band edge
        for label, fn, args in (("generic target", scipy_generic, (m,)),
                                ("informed target (toral's band edge)", scipy_shift_invert, (m, sigma))):
            status, res = capped(a.scipy_cap, fn, *args)
            name = f"clean open chain, lambda_max; scipy {label}"
            if status != "ok":  # no time and no ratio for a script that did not finish
                why = f"did not converge in {a.scipy_cap:g} s" if status == "timeout" else f"failed: {res}"
                rows.append((name, *toral_cols, why, None))
                print(f"{name}: {why}", flush=True)
                continue
            rows.append((name, *toral_cols, res[1], abs(res[0] - lam)))
            print(f"{name}: {res[1]:.2f} s, lambda_max {res[0]:.15f}, toral {lam:.15f}, "
                  f"difference {res[0] - lam:.1e}", flush=True)
        # 3. time versus L
        sizes = [10**4, 3 * 10**4, 10**5] + ([] if a.quick else [3 * 10**5, 10**6])
        times, iters = [], []
        for L in sizes:
            t = toral_run(a.toral, DISORDERED.format(L=L, ranks=a.ranks), work, f"s{L}", a.ranks)
            times.append(t["solver"])
            iters.append(t["iterations"])
        power = float(np.polyfit(np.log(sizes), np.log(times), 1)[0])
        # The restart count depends on the disorder draw at each L, not on L itself: also fit the time
        # per Krylov-Schur restart.
        per_it = [s / max(1, i) for s, i in zip(times, iters)]
        power_it = float(np.polyfit(np.log(sizes), np.log(per_it), 1)[0])
    cpu = platform.processor() or platform.machine()
    try:
        cpu = re.search(r"model name\s*:\s*(.*)", pathlib.Path("/proc/cpuinfo").read_text()).group(1)
    except Exception:
        pass
    text = ["# Performance", "",
            "Measured by `bench/compare_scipy.py` in one run, toral and the equivalent scipy script side by side on "
            "the same exported integer matrices (toral: `mpiexec -n %d toral run`, method krylov; scipy %s "
            "`scipy.sparse.linalg.eigs`, one process: for the top of S = M (+) M^-T it merges eigs(M, which='LM') "
            "with the shift-invert eigs(M, sigma=0); for the clean chain two scripts, each one shift-invert "
            "eigs(M, k=1, sigma, tol=%g): the generic target, sigma = %g x an estimate from %d power steps on M, "
            "and the informed target, sigma just beyond the bulk band edge that toral reports). Ratios are scipy "
            "time / toral solver time." % (a.ranks, scipy.__version__, CLEAN_TOL, POWER_MARGIN, POWER_STEPS), "",
            f"Machine: {cpu}, {os.cpu_count()} cores, Python {platform.python_version()}, numpy {np.__version__}.",
            "", "| case | L | toral wall (s) | toral solver (s) | toral max RSS per rank (MiB) | scipy (s) | ratio | max |difference| |",
            "|---|---|---|---|---|---|---|---|"]
    for name, L, wall, solver, rss, sp, agree in rows:
        if isinstance(sp, str):  # did not converge within the cap, or failed
            text.append(f"| {name} | {L:.0e} | {wall:.2f} | {solver:.2f} | {rss:.0f} | {sp} | - | - |")
        else:
            text.append(f"| {name} | {L:.0e} | {wall:.2f} | {solver:.2f} | {rss:.0f} | {sp:.2f} | {sp / solver:.1f}x "
                        f"| {agree:.1e} |")
    name0, L0, _, solver0, rss0, sp0, _ = rows[0]
    if not isinstance(sp0, str) and L0 == 1e6:
        # The requirements' targets (at most 5 s on 2 ranks, 1 GB, 10x scipy) were set on a machine where the
        # same scipy eigs took REFERENCE_SCIPY_S; scipy's time here gives this machine's speed relative to it.
        f = sp0 / REFERENCE_SCIPY_S
        text += ["", f"Machine speed: the requirements' targets for the disordered ring (at most 5 s on 2 ranks, "
                     f"1 GB, 10x scipy) were set where this scipy eigs took {REFERENCE_SCIPY_S} s; here it took "
                     f"{sp0:.1f} s ({f:.2f}x that time), so toral's {solver0:.2f} s corresponds to about "
                     f"{solver0 / f:.1f} s there (an estimate, scaling by scipy's time); measured here: ratio "
                     f"{sp0 / solver0:.1f}x, {rss0:.0f} MiB per rank."]
    text += ["", *lines, "", "Solver time versus L (disordered ring, top 16): " +
             ", ".join(f"L = {L:.0e}: {s:.3f} s ({i} restarts)" for L, s, i in zip(sizes, times, iters)) +
             f"; fitted power {power:.2f}; per restart (the restart count follows the disorder draw of each L, "
             f"not L) {power_it:.2f}.", "",
             "Notes. The two clean-chain rows share one toral run. The generic-target row is the script a scipy "
             "user writes without toral: shift-invert eigs returns the eigenvalue nearest sigma, so sigma has to lie "
             "above lambda_max, and power steps approach this clustered top from below and slowly; the margin %g is "
             "the smallest round factor that clears their error (sigma at the estimate itself lands inside the band "
             "and eigs returns an interior eigenvalue). The informed-target row hands scipy toral's own result, the "
             "Bloch band edge of the bulk, the best shift there is: it times scipy's shift-invert once the hard part "
             "is done, not a script scipy alone could run. The project's requirements (issue 3 of its tracker) "
             "state 61.9 s for a shift-invert eigs at L = 1e5 with an unrecorded shift, not reproduced here, and "
             "plain which='LM' not converging even at L = 1e4. Each clean-chain scipy script runs in a child "
             "process capped at %g s; one that has not returned by then is reported as not converged, with no "
             "ratio. Timings on this 2-core machine move by up to 2-3x with other load; rerun the script to compare "
             "on your own hardware." % (POWER_MARGIN, a.scipy_cap), "",
             "The exact entanglement kernels have their own side-by-side benchmark: bench/entanglement_exact.py, "
             "docs/performance_entanglement.md.", ""]
    pathlib.Path(a.out).write_text("\n".join(text))
    print("\n".join(text))


if __name__ == "__main__":
    main()

#!/usr/bin/python3
"""Exact entanglement curves of a toral result file (layout versions 2 and 3,
/entanglement, docs/layout.md), next to their bounds and rates.

For one point, one panel per region: the certified Gaussian S_A(t) and the
stabilizer S_A(t) for every local dimension N, with two rate lines that are
not bounds: S_A(0) + Lambda_|A| t, the asymptotic growth rate of a generic
region (/entanglement/lyapunov_rate), and S_A(0) + r_A t, the rate this
region reaches (/entanglement/region_rate); and the two bounds (theorems) of
each N: the light-cone line S_A(0) + 2 c ln N t and the Hilbert-space cap
min(|A|, L - |A|) ln N. On an open chain of clean gates a third rate line,
S_A(0) + Lambda^tr t (/entanglement/transient_rate: the ring's rate, which a
bulk region grows at while its backward light cone stays inside the chain),
with the end of that window (/entanglement/transient_window) marked: the
curve against both the eigenvalue rate and the transient rate. With --table:
per point and region the late-time slopes and their ratios to Lambda_|A|,
to the region rate and to the light-cone rate, as stored by toral, and the
transient rate and ratio when the file has them.

    toral_curves.py run.h5 --point 3 -o curves.png
    toral_curves.py run.h5 --table

Exit status: 0 on success, 2 on a usage error (missing file, not a toral
file, no /entanglement group, point out of range). Run it with
/usr/bin/python3 (needs h5py, numpy and matplotlib).

Importable: load(), format_table(), plot_point(), main().
"""
from __future__ import annotations

import argparse
import math
import os
import sys
from dataclasses import dataclass

import numpy as np

from toral_file import open_result
PROG = "toral_curves"


class CurveError(Exception):
    """A usage error: reported as one line, exit status 2."""


@dataclass
class Curves:
    path: str
    point_count: int
    status: np.ndarray          # (P,)
    t: np.ndarray               # (nT,)
    region_size: np.ndarray     # (nR,)
    cuts: np.ndarray            # (P, nR), -1 where the region does not fit
    lyapunov_rate: np.ndarray   # (P, nR): Lambda_|A|, asymptotic rate of a generic region (not a bound)
    region_rate: np.ndarray     # (P, nR): the rate each region reaches (not a bound)
    transient_rate: np.ndarray | None    # (P, nR): open clean chains, the ring's rate (files without it: None)
    transient_window: np.ndarray | None  # (P, nR): periods it holds, -1 on rings
    gauss_ratio_transient: np.ndarray | None
    gauss: np.ndarray | None    # (P, nR, nT)
    gauss_slope: np.ndarray | None
    gauss_ratio: np.ndarray | None
    gauss_ratio_region: np.ndarray | None
    local_dim: np.ndarray       # (nM,), empty without stabilizer curves
    stab: np.ndarray | None     # (P, nM, nR, nT)
    stab_slope: np.ndarray | None
    stab_ratio_lyap: np.ndarray | None
    stab_ratio_light: np.ndarray | None
    cap: np.ndarray | None      # (P, nM, nR)
    light_rate: np.ndarray | None


def load(path: str) -> Curves:
    with open_result(path, CurveError) as f:
        if "entanglement" not in f:
            raise CurveError(f"no /entanglement group in {path} (the run had no [entanglement] table)")
        e = f["entanglement"]

        def get(name):
            return np.asarray(e[name][()]) if name in e else None

        status = np.asarray(f["points/status"][()]) if "points/status" in f else np.zeros(0)
        g = "gaussian" in e
        s = "stabilizer" in e
        return Curves(
            path=path, point_count=int(get("cuts").shape[0]), status=status, t=get("t"),
            region_size=get("region_size"), cuts=get("cuts"), lyapunov_rate=get("lyapunov_rate"),
            region_rate=get("region_rate"), transient_rate=get("transient_rate"),
            transient_window=get("transient_window"),
            gauss_ratio_transient=get("gaussian/slope_over_transient") if g else None,
            gauss=get("gaussian/entropy") if g else None, gauss_slope=get("gaussian/slope") if g else None,
            gauss_ratio=get("gaussian/slope_over_lyapunov") if g else None,
            gauss_ratio_region=get("gaussian/slope_over_region_rate") if g else None,
            local_dim=get("stabilizer/local_dim") if s else np.zeros(0, dtype=np.int64),
            stab=get("stabilizer/entropy") if s else None, stab_slope=get("stabilizer/slope") if s else None,
            stab_ratio_lyap=get("stabilizer/slope_over_lyapunov") if s else None,
            stab_ratio_light=get("stabilizer/slope_over_lightcone") if s else None,
            cap=get("stabilizer/cap") if s else None, light_rate=get("stabilizer/lightcone_rate") if s else None)


def _fmt(x) -> str:
    x = float(x)
    if math.isnan(x):
        return "nan"
    return ("inf" if x > 0 else "-inf") if math.isinf(x) else f"{x:.4g}"


def format_table(c: Curves) -> str:
    head = ["point", "region", "|A|", "Lambda_A", "rate_A"]
    tr = c.transient_rate is not None and bool(np.isfinite(c.transient_rate).any())
    if tr:
        head += ["transient_A", "window"]
    if c.gauss is not None:
        head += ["gauss_slope", "gauss/Lambda", "gauss/rate"]
        if tr and c.gauss_ratio_transient is not None:
            head += ["gauss/transient"]
    for N in c.local_dim:
        head += [f"N{N}_slope", f"N{N}/Lambda", f"N{N}/light"]
    rows = ["  ".join(head)]
    for p in range(c.point_count):
        for k in range(c.region_size.size):
            if c.cuts[p, k] < 0:
                continue  # the region does not fit this lattice
            r = [str(p), str(k), str(int(c.region_size[k])), _fmt(c.lyapunov_rate[p, k]),
                 _fmt(c.region_rate[p, k])]
            if tr:
                r += [_fmt(c.transient_rate[p, k]), str(int(c.transient_window[p, k]))]
            if c.gauss is not None:
                r += [_fmt(c.gauss_slope[p, k]), _fmt(c.gauss_ratio[p, k]), _fmt(c.gauss_ratio_region[p, k])]
                if tr and c.gauss_ratio_transient is not None:
                    r += [_fmt(c.gauss_ratio_transient[p, k])]
            for j in range(c.local_dim.size):
                r += [_fmt(c.stab_slope[p, j, k]), _fmt(c.stab_ratio_lyap[p, j, k]),
                      _fmt(c.stab_ratio_light[p, j, k])]
            rows.append("  ".join(r))
    return "\n".join(rows)


def plot_point(c: Curves, point: int, out: str) -> None:
    if not 0 <= point < c.point_count:
        raise CurveError(f"point {point} out of range (the file has {c.point_count} points)")
    regions = [k for k in range(c.region_size.size) if c.cuts[point, k] >= 0]
    if not regions:
        raise CurveError(f"no region fits point {point}'s lattice")
    import matplotlib

    matplotlib.use(os.environ.get("MPLBACKEND", "Agg"))
    import matplotlib.pyplot as plt

    # Gaussian curves (unbounded in t) on top, stabilizer curves (capped) below.
    rows = [r for r, present in (("gaussian", c.gauss is not None), ("stabilizer", c.stab is not None)) if present]
    fig, axes = plt.subplots(len(rows), len(regions), figsize=(4.2 * len(regions), 3.2 * len(rows)), squeeze=False)
    t = c.t.astype(float)
    for col, k in enumerate(regions):
        lam = float(c.lyapunov_rate[point, k])
        rate = float(c.region_rate[point, k])
        trate = float(c.transient_rate[point, k]) if c.transient_rate is not None else math.nan
        twin = int(c.transient_window[point, k]) if c.transient_window is not None else -1
        for row, kind in enumerate(rows):
            ax = axes[row][col]
            if kind == "gaussian":
                S = c.gauss[point, k]
                ax.plot(t, S, color="k", lw=1.6, label="Gaussian (certified)")
                if math.isfinite(lam) and np.isfinite(S[0]):
                    ax.plot(t, S[0] + lam * t, color="k", ls=":", lw=1,
                            label=r"$S(0)+\Lambda_{|A|}t$ (generic region)")
                if math.isfinite(rate) and np.isfinite(S[0]):
                    ax.plot(t, S[0] + rate * t, color="tab:red", ls=(0, (1, 2, 4, 2)), lw=1,
                            label=r"$S(0)+r_A t$ (this region)")
                if math.isfinite(trate) and np.isfinite(S[0]):
                    ax.plot(t, S[0] + trate * t, color="tab:blue", ls="--", lw=1,
                            label=r"$S(0)+\Lambda^{tr}_{|A|}t$ (transient: ring of the same gates)")
                    if 0 <= twin <= t[-1]:
                        ax.axvline(twin, color="tab:blue", ls=":", lw=0.8, label="light cone reaches an end")
            else:
                for j, N in enumerate(c.local_dim):
                    S = c.stab[point, j, k]
                    line, = ax.plot(t, S, lw=1.2, label=f"stabilizer N={N}")
                    colr = line.get_color()
                    cap = float(c.cap[point, j, k])
                    ax.axhline(cap, color=colr, ls="--", lw=0.8)
                    if np.isfinite(S[0]):
                        ax.plot(t, np.minimum(S[0] + float(c.light_rate[point, j, k]) * t, cap), color=colr,
                                ls="-.", lw=0.8)
            ax.set_xlabel("t (periods)")
            ax.set_ylabel(r"$S_A(t)$ (nats)")
            ax.set_title(f"point {point}, region {k} (|A| = {int(c.region_size[k])}, c = {int(c.cuts[point, k])})",
                         fontsize=9)
            ax.legend(fontsize=7, loc="upper left", framealpha=0.6)
    title = ("bounds (theorems): dashed Hilbert-space cap, dash-dot light cone (capped);\nrates, not bounds: "
             "dotted asymptotic rate of a generic region (eigenvalues), red that region's rate")
    if c.transient_rate is not None and np.isfinite(c.transient_rate[point]).any():
        title += ",\nblue dashed the open chain's transient rate (held until the dotted blue line)"
    fig.suptitle(title, fontsize=8)
    fig.tight_layout()
    fig.savefig(out, dpi=120)
    plt.close(fig)


def build_parser() -> argparse.ArgumentParser:
    ap = argparse.ArgumentParser(prog=PROG, description=__doc__.split("\n\n")[0])
    ap.add_argument("file", help="toral result file (HDF5)")
    ap.add_argument("--point", type=int, default=0, help="point index (row of /points), default 0")
    ap.add_argument("-o", "--output", help="PNG to write (default: no plot)")
    ap.add_argument("--table", action="store_true", help="print slopes and ratios for every point and region")
    return ap


def main(argv: list[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    try:
        c = load(args.file)
        if args.table:
            print(format_table(c))
        if args.output:
            plot_point(c, args.point, args.output)
        if not args.table and not args.output:
            raise CurveError("nothing to do: give -o FILE.png and/or --table")
    except CurveError as e:
        print(f"{PROG}: error: {e}", file=sys.stderr)
        return 2
    return 0


if __name__ == "__main__":
    sys.exit(main())

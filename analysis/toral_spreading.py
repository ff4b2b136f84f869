#!/usr/bin/python3
"""Spreading of a localised perturbation in a toral result file (/spreading,
docs/layout.md; the run needs a [spreading] table), with the exact
velocity-dependent Lyapunov exponent of /rays when the file has it.

For each chosen point, two panels. Left: the space-time map of the stored
amplitude profile ln|dx_t(x)| = ln max(|q|, |p|) (x = site - start
horizontally, t vertically; white where the amplitude is 0), with the rays
x = v_B- t and x = v_B+ t drawn over it and the light cone x = +-2t dashed.
Right: lambda(v) against the ray velocity v: the measured finite-time ray
rate of the first start, the mean over the starts with its standard error
when the run had starts > 1, and the exact /rays/lyapunov on /rays/v when
the file has a /rays group that is finite for the point; v_B- and v_B+ and
the light cone as vertical lines, lambda = 0 as a horizontal line.

v_B+- (the butterfly velocities, where lambda(v) crosses 0) come from
/rays/butterfly_left and /rays/butterfly_right when they are finite for the
point, else from the measured rates (ray_rate_mean when present, else
ray_rate): walking out from the largest rate, the first velocity on each
side where the rate is <= 0, interpolated linearly with its inner
neighbour; where the rate there is -inf (no amplitude on that ray), that
grid velocity itself; NaN when the rates stay positive up to the end of
the measured rays. With --table: per point its start, number of starts, T,
the largest ray rate of the first start and its velocity, the mean over
the starts of each start's largest rate with its standard error
(/spreading/max_ray_rate_mean, _se), v_B+- and where they come from.

    toral_spreading.py run.h5 --point 3 -o spreading.png
    toral_spreading.py run.h5 --point 0 --point 5 -o spreading.png --table

Exit status: 0 on success, 2 on a usage error (missing file, not a toral
file, no /spreading group, point out of range or without a spreading
profile). Run it with /usr/bin/python3 (needs h5py, numpy and matplotlib).

Importable: load(), measured_butterfly(), format_table(), plot_points(),
main().
"""
from __future__ import annotations

import argparse
import math
import sys
from dataclasses import dataclass

import numpy as np

from toral_file import open_result

PROG = "toral_spreading"


class SpreadingError(Exception):
    """A usage error: reported as one line, exit status 2."""


@dataclass
class Rays:
    """The exact lambda(v) of a translation-invariant point (/rays)."""
    v: np.ndarray                 # (nv,) sites/period
    lyapunov: np.ndarray          # (nv,)
    butterfly: tuple[float, float]
    cone: tuple[float, float]


@dataclass
class PointSpreading:
    path: str
    point: int
    start: int
    starts: np.ndarray            # (n,) the starting sites; starts[0] == start
    t: np.ndarray                 # (nt,) kept times
    x: np.ndarray                 # (L,) site - start
    log_amplitude: np.ndarray     # (nt, L), -inf where the amplitude is 0
    v: np.ndarray                 # (nv,) ray velocities
    ray_rate: np.ndarray          # (nv,) of the first start
    ray_rate_mean: np.ndarray | None  # (nv,) over the starts (None: an older file or one start)
    ray_rate_se: np.ndarray | None
    max_mean: tuple[float, float]  # (max_ray_rate_mean, max_ray_rate_se): NaN for one start
    light_cone: float
    rays: Rays | None             # None: no /rays group or not finite for the point
    butterfly: tuple[float, float]
    butterfly_source: str         # "rays" or "measured"


def measured_butterfly(v: np.ndarray, rate: np.ndarray) -> tuple[float, float]:
    """(v_B-, v_B+) from rates on a velocity grid (the rule in the module
    docstring); NaN for a side without a crossing, both NaN when no rate is
    positive."""
    v = np.asarray(v, float)
    r = np.asarray(rate, float)
    fin = np.isfinite(r)
    if not fin.any() or np.max(r[fin]) <= 0:
        return math.nan, math.nan
    peak = int(np.flatnonzero(fin)[np.argmax(r[fin])])

    def side(step: int) -> float:
        j = peak
        while 0 <= j + step < len(r):
            j += step
            if math.isnan(r[j]):
                return math.nan  # the rays ended (left the chain) before a crossing
            if r[j] <= 0:
                if math.isinf(r[j]):
                    return float(v[j])
                i = j - step
                return float(v[i] + (v[j] - v[i]) * r[i] / (r[i] - r[j]))
        return math.nan
    return side(-1), side(+1)


def _finite(x) -> bool:
    return bool(np.isfinite(x))


def load(path: str, point: int) -> PointSpreading:
    """The spreading of one point (raises SpreadingError with a one-line
    message)."""
    with open_result(path, SpreadingError) as f:
        if "spreading" not in f:
            raise SpreadingError(f"no /spreading group in {path} (the run had no [spreading] table)")
        g = f["spreading"]
        n = int(f["points/status"].shape[0])
        if not 0 <= point < n:
            raise SpreadingError(f"point {point} is outside 0..{n - 1} of {path}")
        start = int(g["start"][point])
        prof = np.asarray(g["log_amplitude"][point], float)
        if start < 0 or np.isnan(prof).all():
            raise SpreadingError(f"point {point} of {path} has no spreading profile (its site does not fit the "
                                 "lattice, or the point failed)")
        cols = ~np.isnan(prof).all(axis=0)  # the point's own sites (NaN beyond its L)
        L = int(np.flatnonzero(cols)[-1]) + 1
        prof = prof[:, :L]
        v = np.asarray(g["velocity"][()], float)
        rr = np.asarray(g["ray_rate"][point], float)
        mean = se = None
        starts = np.array([start])
        if "ray_rate_mean" in g:
            mean = np.asarray(g["ray_rate_mean"][point], float)
            se = np.asarray(g["ray_rate_se"][point], float)
        if "starts" in g:
            starts = np.asarray(g["starts"][point], np.int64)
        max_mean = (math.nan, math.nan)
        if len(starts) < 2:
            mean = se = None  # one start: the mean is ray_rate itself
        elif "max_ray_rate_mean" in g:
            max_mean = (float(g["max_ray_rate_mean"][point]), float(g["max_ray_rate_se"][point]))
        cone = float(np.asarray(g.attrs.get("light_cone_velocity", 2.0)).ravel()[0])
        rays = None
        if "rays" in f and "lyapunov" in f["rays"]:
            r = f["rays"]
            lam = np.asarray(r["lyapunov"][point], float)
            if np.isfinite(lam).any():
                get = lambda name: float(r[name][point]) if name in r else math.nan
                rays = Rays(np.asarray(r["v"][()], float), lam, (get("butterfly_left"), get("butterfly_right")),
                            (get("cone_left"), get("cone_right")))
        if rays is not None and _finite(rays.butterfly[0]) and _finite(rays.butterfly[1]):
            bfly, source = rays.butterfly, "rays"
        else:
            bfly, source = measured_butterfly(v, mean if mean is not None else rr), "measured"
        t = np.asarray(g["t"][()], np.int64)
        return PointSpreading(path, point, start, starts, t, np.arange(L) - start, prof, v, rr, mean, se, max_mean, cone,
                              rays, bfly, source)


def _fmt(x: float) -> str:
    return "nan" if math.isnan(x) else f"{x:.4f}"


def format_table(points: list[PointSpreading]) -> str:
    lines = [f"{'point':>5} {'start':>5} {'starts':>6} {'T':>6} {'max_rate':>9} {'at_v':>7} {'mean_max':>9} "
             f"{'se':>7} {'v_B-':>8} {'v_B+':>8} source"]
    for s in points:
        fin = np.isfinite(s.ray_rate)
        top, at = (float(np.max(s.ray_rate[fin])), float(s.v[fin][np.argmax(s.ray_rate[fin])])) if fin.any() \
            else (math.nan, math.nan)
        mm, mse = s.max_mean
        lines.append(f"{s.point:5d} {s.start:5d} {len(s.starts):6d} {int(s.t[-1]):6d} {_fmt(top):>9} {_fmt(at):>7} "
                     f"{_fmt(mm):>9} {_fmt(mse):>7} {_fmt(s.butterfly[0]):>8} {_fmt(s.butterfly[1]):>8} "
                     f"{s.butterfly_source}")
    return "\n".join(lines)


def _space_time(ax, s: PointSpreading) -> None:
    img = np.ma.masked_invalid(np.where(np.isneginf(s.log_amplitude), np.nan, s.log_amplitude))
    m = ax.pcolormesh(s.x, s.t, img, shading="nearest", cmap="viridis")
    ax.figure.colorbar(m, ax=ax, label="ln|δx_t(x)|")
    T = float(s.t[-1])
    tt = np.array([0.0, T])
    ax.plot(s.light_cone * tt, tt, "--", color="0.3", lw=1, label=f"light cone x = ±{s.light_cone:g} t")
    ax.plot(-s.light_cone * tt, tt, "--", color="0.3", lw=1)
    label = f"x = v_B± t ({s.butterfly_source})"
    for vb in s.butterfly:
        if not math.isnan(vb):
            ax.plot(vb * tt, tt, "-", color="C3", lw=1.4, label=label)
            label = None
    ax.set_xlim(s.x[0] - 0.5, s.x[-1] + 0.5)
    ax.set_xlabel("x = site − start")
    ax.set_ylabel("t (periods)")
    ax.set_title(f"point {s.point}: spreading from site {s.start}", fontsize=9)
    ax.legend(fontsize=7, loc="upper left")


def _rates(ax, s: PointSpreading) -> None:
    shown = lambda r: np.where(np.isfinite(r), r, np.nan)
    ax.plot(s.v, shown(s.ray_rate), "o-", ms=3, lw=1, color="C0", label=f"ray rate, start {s.start} (T = {s.t[-1]})")
    if s.ray_rate_mean is not None:
        m, e = shown(s.ray_rate_mean), np.where(np.isfinite(s.ray_rate_se), s.ray_rate_se, 0.0)
        ax.fill_between(s.v, m - e, m + e, color="C1", alpha=0.3, lw=0)
        ax.plot(s.v, m, "-", lw=1.4, color="C1", label=f"mean over {len(s.starts)} starts ± SE")
    if s.rays is not None:
        ax.plot(s.rays.v, shown(s.rays.lyapunov), "-", lw=1.6, color="k", label="exact λ(v) (/rays)")
    ax.axhline(0, color="0.5", lw=0.8)
    for c in (-s.light_cone, s.light_cone):
        ax.axvline(c, color="0.3", ls="--", lw=1, label="light cone" if c < 0 else None)
    label = f"v_B± ({s.butterfly_source})"
    for vb in s.butterfly:
        if not math.isnan(vb):
            ax.axvline(vb, color="C3", lw=1.2, label=label)
            label = None
    ax.set_xlabel("v (sites/period)")
    ax.set_ylabel("λ(v) (1/period)")
    ax.set_title(f"point {s.point}: growth along rays x = v t", fontsize=9)
    ax.legend(fontsize=7, loc="best")


def plot_points(points: list[PointSpreading], output: str) -> None:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, axes = plt.subplots(len(points), 2, figsize=(11, 4.2 * len(points)), squeeze=False)
    for row, s in zip(axes, points):
        _space_time(row[0], s)
        _rates(row[1], s)
    fig.tight_layout()
    fig.savefig(output, dpi=110)
    plt.close(fig)


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog=PROG, description=__doc__.split("\n\n")[0])
    p.add_argument("file", help="toral result file with /spreading (layout version 3)")
    p.add_argument("--point", type=int, action="append",
                   help="row of a point; repeat for several (one row of panels each; default 0)")
    p.add_argument("-o", "--output", help="PNG to write")
    p.add_argument("--table", action="store_true", help="print the start(s), largest rate and v_B± of each point")
    return p


def main(argv: list[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    try:
        if not args.table and not args.output:
            raise SpreadingError("nothing to do: give -o FILE.png and/or --table")
        points = [load(args.file, i) for i in (args.point or [0])]
        if args.table:
            print(format_table(points))
        if args.output:
            plot_points(points, args.output)
    except SpreadingError as e:
        print(f"{PROG}: error: {e}", file=sys.stderr)
        return 2
    return 0


if __name__ == "__main__":
    sys.exit(main())

#!/usr/bin/python3
"""Bloch band structure of one point of a toral result file (/bands,
docs/layout.md; the run needs a [bands] table).

The nonnegative exponents of the block M(k) against the momentum k in
[0, pi] (the exponents at -k are the same): the bulk bands as curves on the
run's k grid, the finite ring's allowed momenta as points on them (k folded
into [0, pi]), the hyperbolic arcs shaded and the kinks (parabolic momenta)
marked. With --table: per arc its k-range, class and unit-circle count.

    toral_bands.py run.h5 --point 3 -o bands.png
    toral_bands.py run.h5 --point 3 --table

Exit status: 0 on success, 2 on a usage error (missing file, not a toral
file, no /bands group, point out of range or without bands). Run it with
/usr/bin/python3 (needs h5py, numpy and matplotlib).

Importable: load(), format_table(), plot_point(), main().
"""
from __future__ import annotations

import argparse
import math
import sys
from dataclasses import dataclass

import numpy as np

from toral_file import open_result

PROG = "toral_bands"
CLASSES = ("elliptic", "parabolic", "hyperbolic")


class BandsError(Exception):
    """A usage error: reported as one line, exit status 2."""


@dataclass
class PointBands:
    path: str
    point: int
    k: np.ndarray | None              # (nK,) bulk grid
    bulk: np.ndarray | None           # (nK, 4)
    bulk_class: np.ndarray | None     # (nK,)
    ring_k: np.ndarray | None         # (m,) this point's ring momenta
    ring: np.ndarray | None           # (m, 4)
    ring_class: np.ndarray | None     # (m,)
    arcs: list[tuple[float, float, int, int]]  # (lo, hi, on_circle, class)
    kinks: np.ndarray                 # parabolic momenta in [0, pi]


def load(path: str, point: int) -> PointBands:
    """The bands of one point (raises BandsError with a one-line message)."""
    with open_result(path, BandsError) as f:
        if "bands" not in f:
            raise BandsError(f"no /bands group in {path} (the run had no [bands] table)")
        g = f["bands"]
        n = int(f["points/status"].shape[0])
        if not 0 <= point < n:
            raise BandsError(f"point {point} is outside 0..{n - 1} of {path}")
        k = bulk = bulk_class = ring_k = ring = ring_class = None
        arcs: list[tuple[float, float, int, int]] = []
        kinks = np.zeros(0)
        if "bulk_exponents" in g:
            bulk = g["bulk_exponents"][point]
            if np.isnan(bulk).all():
                bulk = None
            else:
                k = g["k"][()]
                bulk_class = g["bulk_class"][point]
                lo, hi = g["arc_lo"][point], g["arc_hi"][point]
                on, cls = g["arc_on_circle"][point], g["arc_class"][point]
                arcs = [(float(a), float(b), int(c), int(d)) for a, b, c, d in zip(lo, hi, on, cls) if not math.isnan(a)]
                kinks = g["kinks"][point]
                kinks = kinks[~np.isnan(kinks)]
        if "ring_exponents" in g:
            rk = g["ring_k"][point]
            keep = ~np.isnan(rk)
            if keep.any():
                ring_k, ring, ring_class = rk[keep], g["ring_exponents"][point][keep], g["ring_class"][point][keep]
        if bulk is None and ring is None:
            raise BandsError(f"point {point} of {path} has no bands (gates not translation-invariant or redrawn in time)")
        return PointBands(path, point, k, bulk, bulk_class, ring_k, ring, ring_class, arcs, kinks)


def format_table(b: PointBands) -> str:
    lines = [f"{b.path}: point {b.point}"]
    if b.arcs:
        lines.append(f"{'k_lo':>10} {'k_hi':>10} {'on circle':>10} class")
        for lo, hi, on, cls in b.arcs:
            lines.append(f"{lo:10.6f} {hi:10.6f} {on:10d} {CLASSES[cls]}")
        lines.append("kinks (parabolic): " + (" ".join(f"{x:.6f}" for x in b.kinks) if len(b.kinks) else "none"))
    if b.ring is not None:
        counts = [int((b.ring_class == c).sum()) for c in range(3)]
        lines.append(f"ring: {len(b.ring_k)} momenta: " + ", ".join(f"{n} {c}" for n, c in zip(counts, CLASSES)))
    return "\n".join(lines)


def plot_point(b: PointBands, output: str) -> None:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, ax = plt.subplots(figsize=(6.4, 4.2))
    for lo, hi, _, cls in b.arcs:
        if cls == 2:
            ax.axvspan(lo, hi, color="0.92", zorder=0)
    for x in b.kinks:
        ax.axvline(x, color="0.6", lw=0.8, ls=":", zorder=1)
    if b.bulk is not None:
        for j, style in ((0, "-"), (1, "--")):
            ax.plot(b.k, b.bulk[:, j], style, color="C0", lw=1.4, label=f"bulk band {j + 1}" if j == 0 else None)
    if b.ring is not None:
        folded = np.where(b.ring_k > math.pi, 2 * math.pi - b.ring_k, b.ring_k)
        for j in (0, 1):
            ax.plot(folded, b.ring[:, j], "o", ms=4, color="C3", label="ring momenta" if j == 0 else None)
    ax.set_xlim(0, math.pi)
    ax.set_xlabel("momentum k")
    ax.set_ylabel("exponent ln|mu(k)| per period")
    ax.set_title(f"point {b.point}: Bloch bands (shaded: hyperbolic, dotted: kinks)", fontsize=9)
    ax.legend(fontsize=8, loc="best")
    fig.tight_layout()
    fig.savefig(output, dpi=120)
    plt.close(fig)


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog=PROG, description=__doc__.split("\n\n")[0])
    p.add_argument("file", help="toral result file with /bands (layout version 3)")
    p.add_argument("--point", type=int, default=0, help="row of the point (default 0)")
    p.add_argument("-o", "--output", help="PNG to write")
    p.add_argument("--table", action="store_true", help="print the arcs, kinks and ring classes")
    return p


def main(argv: list[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    try:
        b = load(args.file, args.point)
        if args.table:
            print(format_table(b))
        if args.output:
            plot_point(b, args.output)
        if not args.table and not args.output:
            raise BandsError("nothing to do: give -o FILE.png and/or --table")
    except BandsError as e:
        print(f"{PROG}: error: {e}", file=sys.stderr)
        return 2
    return 0


if __name__ == "__main__":
    sys.exit(main())

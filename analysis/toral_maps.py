#!/usr/bin/python3
"""Heat maps of a toral result file (layout version 1, docs/layout.md).

Draws two heat maps side by side -- the largest Lyapunov exponent
(/chaos/lambda_max) and the KS entropy density (/chaos/ks_density) -- over two
/points parameters, for the points of one sweep, optionally filtered by
--where name=value. A cell holding several points (e.g. disorder seeds)
shows their mean; failed points (status != 0) are left out and counted in
the title.

    toral_maps.py run.h5 -o maps.png
    toral_maps.py run.h5 --sweep chain --x sites --y bond_a --where boundary=0
    toral_maps.py run.h5 --table

Exit status: 0 on success, 2 on a usage error (missing file, not a toral
file, unknown parameter, sweep or value). Run it with /usr/bin/python3
(needs h5py, numpy and matplotlib).

Importable: load(), select(), default_axes(), grid(), format_table(),
plot_maps(), main().
"""
from __future__ import annotations

import argparse
import os
import sys
from dataclasses import dataclass, field

import numpy as np

from toral_file import open_result
ABSENT = np.iinfo(np.int64).min  # /points/<name> value of a parameter that does not apply
QUANTITIES = ("lambda_max", "ks_density")  # datasets under /chaos that are mapped
PROG = "toral_maps"


class MapError(Exception):
    """A usage error: reported as one line, exit status 2."""


@dataclass
class RunData:
    path: str
    params: dict[str, np.ndarray]  # name -> int64 (P,)
    meanings: dict[str, str]
    swept: list[str]
    sweep_names: list[str]
    status: np.ndarray  # int32 (P,)
    values: dict[str, np.ndarray]  # quantity -> float64 (P,)
    units: dict[str, str]
    point_count: int
    toral_version: str = ""

    @property
    def names(self) -> list[str]:
        return list(self.params)


@dataclass
class Grid:
    x: str
    y: str | None
    xvals: np.ndarray  # sorted distinct values of x
    yvals: np.ndarray  # sorted distinct values of y ([0] when y is None)
    mean: dict[str, np.ndarray]  # quantity -> (ny, nx), NaN where no value
    count: np.ndarray  # (ny, nx) ok points per cell
    failed: np.ndarray  # (ny, nx) failed points per cell
    total_points: int = 0
    total_failed: int = 0
    extra: dict = field(default_factory=dict)


# ---------------------------------------------------------------- loading


def _str(v) -> str:
    if isinstance(v, bytes):
        return v.decode("utf-8", "replace")
    if isinstance(v, np.ndarray) and v.shape == ():
        return _str(v[()])
    return str(v)


def _strlist(v) -> list[str]:
    if v is None:
        return []
    if isinstance(v, (str, bytes)):  # tolerated: a joined list "a,b" or "a b"
        s = _str(v)
        return [p.strip() for p in (s.split(",") if "," in s else s.split()) if p.strip()]
    return [_str(x) for x in np.asarray(v).ravel()]


def load(path: str) -> RunData:
    """Reads what the maps need from a toral result file; MapError if it is
    missing or not a toral result file of a supported layout version."""
    import h5py

    with open_result(path, MapError) as f:
        need = ["points", "points/status"] + [f"chaos/{q}" for q in QUANTITIES]
        missing = [n for n in need if n not in f]
        if missing:
            raise MapError(f"not a complete toral result file ({', '.join('/' + m for m in missing)} "
                           f"missing): {path}")
        pts = f["points"]
        status = np.asarray(pts["status"][()], dtype=np.int64)
        P = status.shape[0]
        params: dict[str, np.ndarray] = {}
        meanings: dict[str, str] = {}
        # the declared order when the file records it, else by name
        order = _strlist(pts.attrs.get("parameters")) or sorted(pts)
        for name in order:
            obj = pts.get(name)
            if name in ("status", "message", "method", "wall_time") or obj is None:
                continue
            if not isinstance(obj, h5py.Dataset) or obj.ndim != 1 or obj.dtype.kind not in "iu":
                continue
            params[name] = np.asarray(obj[()], dtype=np.int64)
            meanings[name] = _str(obj.attrs.get("meaning", ""))
        values, units = {}, {}
        for q in QUANTITIES:
            d = f["chaos/" + q]
            values[q] = np.asarray(d[()], dtype=np.float64)
            units[q] = _str(d.attrs.get("units", ""))
        for name, v in list(params.items()) + list(values.items()):
            if v.shape != (P,):
                raise MapError(f"malformed toral result file ({name} has shape {v.shape}, "
                               f"expected ({P},)): {path}")
        return RunData(
            path=path,
            params=params,
            meanings=meanings,
            swept=_strlist(pts.attrs.get("swept")),
            sweep_names=_strlist(f.attrs.get("sweep_names")),
            status=status,
            values=values,
            units=units,
            point_count=int(np.asarray(f.attrs.get("point_count", P)).ravel()[0]),
            toral_version=_str(f.attrs.get("toral_version", "")),
        )


# ---------------------------------------------------------------- selecting


def resolve_sweep(data: RunData, sweep: str | int | None) -> int | None:
    """Index of the chosen sweep (by name or index). Default: 0. None when the
    file has no /points/sweep parameter (then all points are used)."""
    if "sweep" not in data.params:
        if sweep is not None:
            raise MapError(f"{data.path} has no /points/sweep parameter; drop --sweep")
        return None
    if sweep is None:
        return 0
    s = str(sweep)
    if s in data.sweep_names:
        return data.sweep_names.index(s)
    try:
        i = int(s)
    except ValueError:
        raise MapError(f"unknown sweep '{s}'; sweeps: {', '.join(data.sweep_names) or '(none)'}") from None
    n = len(data.sweep_names) if data.sweep_names else int(data.params["sweep"].max(initial=-1)) + 1
    if not 0 <= i < n:
        raise MapError(f"sweep index {i} out of range 0..{n - 1}")
    return i


def parse_where(items: list[str] | None, data: RunData) -> dict[str, int]:
    """'name=value' filters -> {name: int value}; value may be 'absent'."""
    out: dict[str, int] = {}
    for it in items or []:
        if "=" not in it:
            raise MapError(f"--where expects name=value, got '{it}'")
        name, val = (s.strip() for s in it.split("=", 1))
        _check_param(data, name, "--where")
        if val == "absent":
            out[name] = int(ABSENT)
            continue
        try:
            out[name] = int(val)
        except ValueError:
            raise MapError(f"--where {name}: value '{val}' is not an integer (or 'absent')") from None
    return out


def _check_param(data: RunData, name: str, what: str) -> None:
    if name not in data.params:
        raise MapError(f"{what}: unknown parameter '{name}'; parameters: {', '.join(data.names)}")


def select(data: RunData, sweep: int | None = None, where: dict[str, int] | None = None) -> np.ndarray:
    """Boolean mask of the points of sweep `sweep` (None: all) matching every
    filter (failed points included; grid() separates them)."""
    mask = np.ones(data.status.shape[0], dtype=bool)
    if sweep is not None:
        mask &= data.params["sweep"] == sweep
    for name, v in (where or {}).items():
        _check_param(data, name, "--where")
        mask &= data.params[name] == v
    return mask


def default_axes(data: RunData, mask: np.ndarray) -> tuple[str, str | None]:
    """The first two names of the `swept` attribute that take more than one
    value among the selected points; 'seed' is taken last, so that seeds are
    averaged over when other parameters vary. y is None when only one varies."""
    varying = [n for n in data.swept if n in data.params and np.unique(data.params[n][mask]).size > 1]
    varying = [n for n in varying if n != "seed"] + [n for n in varying if n == "seed"]
    if not varying:
        raise MapError("no parameter varies among the selected points; choose --x (and --y)")
    return varying[0], (varying[1] if len(varying) > 1 else None)


# ---------------------------------------------------------------- gridding


def grid(data: RunData, x: str, y: str | None, mask: np.ndarray | None = None) -> Grid:
    """Means of the mapped quantities over the points of each (x, y) cell.
    Failed points are counted per cell but not averaged; NaN values of ok
    points are skipped; a cell without values is NaN."""
    _check_param(data, x, "--x")
    if y is not None:
        _check_param(data, y, "--y")
        if y == x:
            raise MapError(f"--x and --y are both '{x}'")
    if mask is None:
        mask = np.ones(data.status.shape[0], dtype=bool)
    if not mask.any():
        raise MapError("no points selected (check --sweep and --where)")
    xs = data.params[x][mask]
    ys = data.params[y][mask] if y is not None else np.zeros_like(xs)
    ok = data.status[mask] == 0
    xvals, xi = np.unique(xs, return_inverse=True)
    yvals, yi = np.unique(ys, return_inverse=True)
    shape = (yvals.size, xvals.size)
    count = np.zeros(shape, dtype=np.int64)
    failed = np.zeros(shape, dtype=np.int64)
    np.add.at(count, (yi[ok], xi[ok]), 1)
    np.add.at(failed, (yi[~ok], xi[~ok]), 1)
    means = {}
    for q, v in data.values.items():
        vals = v[mask]
        use = ok & np.isfinite(vals)
        s = np.zeros(shape)
        n = np.zeros(shape, dtype=np.int64)
        np.add.at(s, (yi[use], xi[use]), vals[use])
        np.add.at(n, (yi[use], xi[use]), 1)
        with np.errstate(invalid="ignore", divide="ignore"):
            means[q] = np.where(n > 0, s / np.maximum(n, 1), np.nan)
    return Grid(x=x, y=y, xvals=xvals, yvals=yvals, mean=means, count=count, failed=failed,
                total_points=int(mask.sum()), total_failed=int((~ok).sum()))


def _label(v: int) -> str:
    return "absent" if v == ABSENT else str(int(v))


def format_table(g: Grid) -> str:
    """Plain text table, one line per cell that holds points."""
    cols = [g.x, g.y or "-", "points", "failed"] + [f"mean_{q}" for q in QUANTITIES]
    rows = []
    for j, yv in enumerate(g.yvals):
        for i, xv in enumerate(g.xvals):
            if g.count[j, i] + g.failed[j, i] == 0:
                continue
            vals = [("nan" if not np.isfinite(g.mean[q][j, i]) else f"{g.mean[q][j, i]:.10g}")
                    for q in QUANTITIES]
            rows.append([_label(xv), _label(yv) if g.y else "-", str(g.count[j, i]), str(g.failed[j, i])] + vals)
    widths = [max(len(c), *(len(r[k]) for r in rows)) if rows else len(c) for k, c in enumerate(cols)]
    out = ["  ".join(c.rjust(w) for c, w in zip(cols, widths))]
    out += ["  ".join(v.rjust(w) for v, w in zip(r, widths)) for r in rows]
    return "\n".join(out) + "\n"


# ---------------------------------------------------------------- plotting


def title_of(data: RunData, g: Grid, sweep: int | None, where: dict[str, int]) -> str:
    parts = [os.path.basename(data.path)]
    if sweep is not None:
        name = data.sweep_names[sweep] if sweep < len(data.sweep_names) else str(sweep)
        parts.append(f"sweep '{name}'")
    if where:
        parts.append("where " + ", ".join(f"{k}={_label(v)}" for k, v in where.items()))
    ok = g.total_points - g.total_failed
    parts.append(f"{ok} points, {g.total_failed} failed (excluded)")
    return " | ".join(parts)


def plot_maps(data: RunData, g: Grid, out: str, title: str):
    """Writes the PNG; returns the matplotlib figure (closed)."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    nx, ny = g.xvals.size, g.yvals.size
    width = min(2 * (4 + 0.4 * nx), 24)
    height = min(3.5 + 0.3 * ny, 14)
    fig, axes = plt.subplots(1, 2, figsize=(width, height), squeeze=False, constrained_layout=True)
    labels = {"lambda_max": "largest Lyapunov exponent", "ks_density": "KS entropy density"}
    for ax, q in zip(axes[0], QUANTITIES):
        m = np.ma.masked_invalid(g.mean[q])
        cmap = matplotlib.colormaps["viridis"].copy()
        cmap.set_bad("#d0d0d0")
        im = ax.imshow(m, origin="lower", aspect="auto", cmap=cmap, interpolation="nearest")
        ax.set_xticks(range(nx), [_label(v) for v in g.xvals],
                      rotation=45 if nx > 8 else 0, ha="right" if nx > 8 else "center")
        ax.set_xlabel(g.x)
        if g.y is not None:
            ax.set_yticks(range(ny), [_label(v) for v in g.yvals])
            ax.set_ylabel(g.y)
        else:
            ax.set_yticks([])
        unit = data.units.get(q, "")
        ax.set_title(f"{labels.get(q, q)} (/chaos/{q})")
        fig.colorbar(im, ax=ax, label=f"{q} [{unit}]" if unit else q)
        if nx * ny <= 64:  # small maps: print the values in the cells
            for j in range(ny):
                for i in range(nx):
                    v = g.mean[q][j, i]
                    if np.isfinite(v):
                        r, gr, b, _ = cmap(im.norm(v))
                        ink = "black" if 0.299 * r + 0.587 * gr + 0.114 * b > 0.5 else "white"
                        ax.text(i, j, f"{v:.3g}", ha="center", va="center", fontsize=7, color=ink)
    fig.suptitle(title, fontsize=10)
    try:
        fig.savefig(out, dpi=120)
    except OSError as e:
        raise MapError(f"cannot write {out}: {e.strerror or e}") from None
    finally:
        plt.close(fig)
    return fig


# ---------------------------------------------------------------- CLI


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog=PROG, description="Heat maps of lambda_max and ks_density from a toral result file.")
    p.add_argument("file", help="toral result file (HDF5, layout version 2 or 3)")
    p.add_argument("-o", "--output", help="PNG to write (default: FILE without .h5 + '.maps.png'; "
                                          "none with --table unless given)")
    p.add_argument("--x", help="/points parameter on the horizontal axis")
    p.add_argument("--y", help="/points parameter on the vertical axis")
    p.add_argument("--sweep", help="sweep name or index (default: the first sweep)")
    p.add_argument("--where", action="append", metavar="NAME=VALUE",
                   help="keep only points with this parameter value (repeatable; VALUE may be 'absent')")
    p.add_argument("--table", action="store_true", help="print a plain text table of the cells")
    return p


def run(args: argparse.Namespace) -> int:
    data = load(args.file)
    sweep = resolve_sweep(data, args.sweep)
    where = parse_where(args.where, data)
    mask = select(data, sweep, where)
    if not mask.any():
        raise MapError("no points selected (check --sweep and --where)")
    for opt in ("x", "y"):
        if getattr(args, opt) is not None:
            _check_param(data, getattr(args, opt), "--" + opt)
    if args.x is None and args.y is None:
        x, y = default_axes(data, mask)
    elif args.x is None:
        raise MapError("--y given without --x")
    else:
        x, y = args.x, args.y
    g = grid(data, x, y, mask)
    if args.table:
        sys.stdout.write(format_table(g))
    out = args.output
    if out is None and not args.table:
        base = args.file[:-3] if args.file.endswith(".h5") else args.file
        out = base + ".maps.png"
    if out is not None:
        plot_maps(data, g, out, title_of(data, g, sweep, where))
        print(f"{PROG}: wrote {out}", file=sys.stderr)
    return 0


def main(argv: list[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    try:
        return run(args)
    except MapError as e:
        print(f"{PROG}: error: {e}", file=sys.stderr)
        return 2


if __name__ == "__main__":
    sys.exit(main())

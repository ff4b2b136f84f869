"""Opening a toral result file for the analysis scripts (layout versions 2
and 3, docs/layout.md: version 3 added dimension scales and the schema
attributes, and kept every dataset these scripts read): one place for the
checks and their one-line messages."""
from __future__ import annotations

import os

import numpy as np

LAYOUT_VERSIONS = (2, 3)


def open_result(path: str, error: type[Exception]):
    """The open h5py.File of a toral result file of the supported layout
    version; raises `error` with a one-line message otherwise."""
    if not os.path.exists(path):
        raise error(f"no such file: {path}")
    if os.path.isdir(path):
        raise error(f"is a directory, not a result file: {path}")
    import h5py

    try:
        f = h5py.File(path, "r")
    except OSError:
        raise error(f"not an HDF5 file (not a toral result file): {path}") from None
    if "layout_version" not in f.attrs:
        f.close()
        raise error(f"not a toral result file (no layout_version attribute): {path}")
    version = int(np.asarray(f.attrs["layout_version"]).ravel()[0])
    if version not in LAYOUT_VERSIONS:
        f.close()
        readable = " and ".join(str(v) for v in LAYOUT_VERSIONS)
        raise error(f"unsupported layout_version {version} in {path} (this script reads {readable})")
    return f

"""`cmake --install` of the already-built tree (no configure, no build): every
file lands under the prefix, and the installed binary and analysis scripts run
from there (RUNPATH to PETSc/SLEPc/HDF5, the scripts' sibling module)."""
import filecmp
import os
import pathlib
import shutil
import subprocess

import h5py
import pytest

from conftest import BUILD, CMAKE, PYTHON, SOURCE, mpi_env

# Source directory -> installed directory (relative to the prefix), and which files.
TREES = {
    "analysis": ("share/toral/analysis", "*.py"),
    "examples": ("share/toral/examples", "*"),
    "jobscripts": ("share/toral/jobscripts", "*"),
    "docs": ("share/doc/toral/docs", "*"),
}
DOCS = ["README.md", "DEVELOPERS.md"]


def source_files(sub, pattern):
    return sorted(p.relative_to(SOURCE / sub) for p in (SOURCE / sub).rglob(pattern)
                  if p.is_file() and "__pycache__" not in p.parts)


@pytest.fixture(scope="module")
def prefix(tmp_path_factory):
    if not (BUILD / "cmake_install.cmake").exists():
        pytest.fail(f"no configured build tree at {BUILD} (set TORAL_BUILD_DIR)")
    prefix = tmp_path_factory.mktemp("prefix")
    p = subprocess.run([CMAKE, "--install", str(BUILD), "--prefix", str(prefix)],
                       capture_output=True, text=True, timeout=120)
    assert p.returncode == 0, p.stdout + p.stderr
    return prefix


@pytest.mark.parametrize("sub", sorted(TREES))
def test_trees_installed(prefix, sub):
    dest, pattern = TREES[sub]
    files = source_files(sub, pattern)
    assert files, f"nothing to install in {sub}/"
    for rel in files:
        src, dst = SOURCE / sub / rel, prefix / dest / rel
        assert dst.is_file(), f"{dst} not installed"
        assert filecmp.cmp(src, dst, shallow=False), f"{dst} differs from {src}"
        # executable scripts (toral_maps.py, slurm.sbatch, ...) stay executable
        assert os.access(dst, os.X_OK) == os.access(src, os.X_OK), dst


def test_docs_installed(prefix):
    for name in DOCS:
        dst = prefix / "share/doc/toral" / name
        assert dst.is_file() and filecmp.cmp(SOURCE / name, dst, shallow=False), dst


def test_nothing_else(prefix):
    """Only bin/toral and share/: no libraries, headers or test binaries."""
    top = sorted(p.name for p in prefix.iterdir())
    assert top == ["bin", "share"], top
    assert sorted(p.name for p in (prefix / "bin").iterdir()) == ["toral"]
    assert sorted(p.name for p in (prefix / "share").iterdir()) == ["doc", "toral"]


def runpath(exe):
    readelf = shutil.which("readelf")
    if readelf is None:
        pytest.skip("readelf not found (Debian: binutils)")
    out = subprocess.run([readelf, "-d", str(exe)], capture_output=True, text=True, check=True).stdout
    for line in out.splitlines():
        if "(RUNPATH)" in line or "(RPATH)" in line:
            # the build tree's entry may end in ':' (CMake pads it for the install rewrite)
            return [d for d in line.split("[", 1)[1].rstrip("]").split(":") if d]
    return []


def test_binary_keeps_library_paths(prefix):
    """The build tree's RUNPATH (PETSc/SLEPc/HDF5 outside the default linker
    path) survives the install, and every library resolves without
    LD_LIBRARY_PATH."""
    exe = prefix / "bin" / "toral"
    built = [d for d in runpath(BUILD / "toral") if not d.startswith(str(BUILD))]
    installed = runpath(exe)
    assert set(built) <= set(installed), (built, installed)
    env = {k: v for k, v in os.environ.items() if k != "LD_LIBRARY_PATH"}
    ldd = subprocess.run(["ldd", str(exe)], capture_output=True, text=True, env=env)
    assert ldd.returncode == 0 and "not found" not in ldd.stdout, ldd.stdout


def run_installed(prefix, *args, cwd=None):
    env = mpi_env()
    env.pop("LD_LIBRARY_PATH", None)
    return subprocess.run([str(prefix / "bin" / "toral"), *map(str, args)], capture_output=True,
                          text=True, env=env, cwd=cwd, timeout=120)


def test_version_and_help(prefix):
    p = run_installed(prefix, "--version")
    assert p.returncode == 0 and p.stdout.startswith("toral "), (p.stdout, p.stderr)
    p = run_installed(prefix, "--help")
    assert p.returncode == 0, p.stderr
    for sub in ("run", "check", "merge", "jobscript", "point"):
        assert sub in p.stdout


def test_installed_examples_check(prefix, tmp_path):
    examples = sorted((prefix / "share/toral/examples").glob("*.toml"))
    assert examples
    for ex in examples:
        p = run_installed(prefix, "check", ex, cwd=tmp_path)
        assert p.returncode == 0, (ex, p.stdout, p.stderr)


def test_installed_example_runs_and_plots(prefix, tmp_path):
    """The smallest installed example (15 points, about a second) to an HDF5
    file, then the installed toral_maps.py on it."""
    config = prefix / "share/toral/examples/symplectic_gates.toml"
    out = tmp_path / "sym.h5"
    p = run_installed(prefix, "run", config, "-o", out, "-q", cwd=tmp_path)
    assert p.returncode == 0, (p.stdout, p.stderr)
    with h5py.File(out, "r") as f:
        assert f.attrs["config_source"] == str(config)
        assert f.attrs["config"] == config.read_text()
        n = int(f.attrs["point_count"])
        assert n > 0 and f["points/status"].shape == (n,)
        assert (f["points/status"][:] == 0).all()
    env = dict(os.environ, MPLBACKEND="Agg", PYTHONDONTWRITEBYTECODE="1")
    png = tmp_path / "sym.png"
    # from another directory, so the sibling toral_file.py must come from the prefix
    p = subprocess.run([PYTHON, str(prefix / "share/toral/analysis/toral_maps.py"), str(out),
                        "-o", str(png), "--table"], capture_output=True, text=True, env=env,
                       cwd=tmp_path, timeout=120)
    assert p.returncode == 0, (p.stdout, p.stderr)
    assert png.stat().st_size > 0

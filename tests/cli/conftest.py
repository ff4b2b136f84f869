import os
import pathlib
import subprocess

import pytest

ROOT = pathlib.Path(__file__).resolve().parents[2]


@pytest.fixture(scope="session")
def toral():
    exe = os.environ.get("TORAL_BIN", str(ROOT / "build" / "toral"))
    if not os.path.exists(exe):
        pytest.fail(f"toral binary not found at {exe} (set TORAL_BIN)")
    return exe


def mpi_env():
    env = dict(os.environ)
    env.update(
        OMPI_ALLOW_RUN_AS_ROOT="1",
        OMPI_ALLOW_RUN_AS_ROOT_CONFIRM="1",
        OMPI_MCA_rmaps_base_oversubscribe="1",
    )
    return env


@pytest.fixture(scope="session")
def run_toral(toral):
    def run(*args, ranks=None, check=False, cwd=None):
        cmd = [toral, *map(str, args)]
        if ranks is not None:
            cmd = ["mpiexec", "--oversubscribe", "-n", str(ranks), *cmd]
        p = subprocess.run(cmd, capture_output=True, text=True, env=mpi_env(), cwd=cwd, timeout=600)
        if check and p.returncode != 0:
            raise AssertionError(f"{cmd} failed ({p.returncode}):\n{p.stdout}\n{p.stderr}")
        return p

    return run


def shard_and_merge(run_toral, cfg, folder, n=2):
    """Runs `cfg` as n shards in `folder` and merges them: the merged file's path."""
    shards = []
    for i in range(n):
        s = folder / f"shard{i}.h5"
        run_toral("run", cfg, "-o", s, "-q", "--shard", f"{i}/{n}", check=True)
        shards.append(s)
    merged = folder / "merged.h5"
    run_toral("merge", merged, *shards, check=True)
    return merged

import os
import pathlib
import shutil
import sys

# Set by tests/CMakeLists.txt; the defaults fit a checkout built into build/.
SOURCE = pathlib.Path(os.environ.get("TORAL_SOURCE_DIR", pathlib.Path(__file__).resolve().parents[2]))
BUILD = pathlib.Path(os.environ.get("TORAL_BUILD_DIR", SOURCE / "build"))
CMAKE = os.environ.get("TORAL_CMAKE") or shutil.which("cmake") or "cmake"
PYTHON = "/usr/bin/python3" if os.path.exists("/usr/bin/python3") else sys.executable


def mpi_env():
    env = dict(os.environ)
    env.update(
        OMPI_ALLOW_RUN_AS_ROOT="1",
        OMPI_ALLOW_RUN_AS_ROOT_CONFIRM="1",
        OMPI_MCA_rmaps_base_oversubscribe="1",
    )
    return env

"""Shared helpers of the bench scripts: the MPI environment for running toral
as root, and a one-line description of the machine for the docs pages."""
import os
import pathlib
import platform


def env():
    """os.environ plus what OpenMPI needs to run as root and oversubscribe."""
    e = dict(os.environ)
    e.update(OMPI_ALLOW_RUN_AS_ROOT="1", OMPI_ALLOW_RUN_AS_ROOT_CONFIRM="1", OMPI_MCA_rmaps_base_oversubscribe="1")
    return e


def machine():
    """CPU model, core count and Python version."""
    cpu = platform.processor() or platform.machine()
    try:
        info = pathlib.Path("/proc/cpuinfo").read_text()
        cpu = next(l.split(":", 1)[1].strip() for l in info.splitlines() if l.startswith("model name"))
    except (OSError, StopIteration):
        pass
    return f"{cpu}, {os.cpu_count()} cores, Python {platform.python_version()}"

"""toral as a subdirectory of a parent CMake project: a temporary parent whose
source and build directories are not toral's configures it (configure only,
no compile), and every path toral uses resolves against toral's own source and
binary directories, never the parent's CMAKE_SOURCE_DIR / CMAKE_BINARY_DIR."""
import json
import os
import re
import shlex
import subprocess

import pytest

from conftest import CMAKE, SOURCE

PARENT = """cmake_minimum_required(VERSION 3.20)
project(toral_parent LANGUAGES C CXX)
# Included before toral: CMAKE_INSTALL_DOCDIR now names the parent, not toral.
include(GNUInstallDirs)
add_subdirectory("{source}" toral)
if(NOT TARGET toral)
  message(FATAL_ERROR "no toral target")
endif()
"""


def configure(src, build, *args):
    p = subprocess.run([CMAKE, "-S", str(src), "-B", str(build), "-G", "Unix Makefiles",
                        "-DCMAKE_EXPORT_COMPILE_COMMANDS=ON", *args],
                       capture_output=True, text=True, timeout=240)
    assert p.returncode == 0, p.stdout + p.stderr
    return p


def cache_value(build, name):
    m = re.search(rf"^{name}:\w+=(.*)$", (build / "CMakeCache.txt").read_text(), re.M)
    return m.group(1) if m else None


@pytest.fixture(scope="module")
def parent(tmp_path_factory):
    """The parent configured with toral's defaults; what the tests look at is
    read here, before the install test below reconfigures the same tree."""
    root = tmp_path_factory.mktemp("parent")
    src, build = root / "src", root / "build"
    src.mkdir()
    (src / "CMakeLists.txt").write_text(PARENT.format(source=SOURCE.as_posix()))
    configure(src, build)
    help_ = subprocess.run([CMAKE, "--build", str(build), "--target", "help"],
                           capture_output=True, text=True, timeout=60)
    assert help_.returncode == 0, help_.stderr
    return dict(
        src=src, build=build, sub=build / "toral",
        targets={l[4:].strip() for l in help_.stdout.splitlines() if l.startswith("... ")},
        commands=json.loads((build / "compile_commands.json").read_text()),
        cache={n: cache_value(build, n) for n in ("TORAL_BUILD_TESTS", "TORAL_INSTALL")},
        install_script=(build / "toral" / "cmake_install.cmake").read_text(),
    )


def test_options_default_off_under_a_parent(parent):
    assert parent["cache"] == {"TORAL_BUILD_TESTS": "OFF", "TORAL_INSTALL": "OFF"}
    assert not (parent["sub"] / "tests").exists()
    assert "share/toral" not in parent["install_script"]


def test_build_system_has_the_toral_targets(parent):
    assert {"toral", "toral_driver", "toral_io", "toral_kernels", "toral_solvers"} <= parent["targets"]
    assert not any(t.startswith("test_") for t in parent["targets"]), parent["targets"]


def test_generated_header_in_toral_binary_dir(parent):
    """default_config.hpp lives in toral's binary directory (PROJECT_BINARY_DIR),
    not in the parent's CMAKE_BINARY_DIR."""
    assert (parent["sub"] / "generated" / "default_config.hpp").is_file()
    assert not (parent["build"] / "generated").exists()


def toral_commands(parent):
    return [c for c in parent["commands"] if c["file"].startswith(str(SOURCE) + os.sep)]


def include_dirs(command):
    args = shlex.split(command)
    out = []
    for i, a in enumerate(args):
        if a in ("-I", "-isystem"):
            out.append(args[i + 1])
        elif a.startswith("-I"):
            out.append(a[2:])
    return out


def test_sources_and_include_dirs_resolve_in_toral(parent):
    cmds = toral_commands(parent)
    files = {os.path.relpath(c["file"], SOURCE) for c in cmds}
    # the solver glob ran in toral's source tree, not the parent's
    solvers = {f"solvers/{p.name}" for p in (SOURCE / "solvers").glob("*.cpp")}
    assert solvers and solvers <= files, sorted(files)
    assert "driver/main.cpp" in files
    for c in cmds:
        for d in include_dirs(c["command"]):
            assert os.path.isdir(d), (c["file"], d)
            assert not d.startswith(str(parent["src"])), (c["file"], d)
            assert not (d.startswith(str(parent["build"]) + os.sep)
                        and not d.startswith(str(parent["sub"]))), (c["file"], d)


def test_headers_resolve(parent):
    """Preprocess one translation unit of each library and main.cpp (which
    includes the generated header) with the generated flags: no compile."""
    picked = {}
    for c in toral_commands(parent):
        rel = os.path.relpath(c["file"], SOURCE)
        key = "main" if rel == "driver/main.cpp" else rel.split(os.sep)[0]
        picked.setdefault(key, c)
    assert {"main", "kernels", "io", "solvers", "driver"} <= set(picked), sorted(picked)
    for c in picked.values():
        args = shlex.split(c["command"])
        i = args.index("-o")
        del args[i:i + 2]
        args = [("-E" if a == "-c" else a) for a in args] + ["-o", os.devnull]
        p = subprocess.run(args, cwd=c["directory"], capture_output=True, text=True, timeout=120)
        assert p.returncode == 0, (c["file"], p.stderr[-2000:])


def quoted_paths(text):
    """Absolute paths quoted in a generated CMake script (not the regexes)."""
    return [s for s in re.findall(r'"(/[^"]*)"', text) if not re.search(r"[][$^\\*]", s)]


def test_install_rules_and_tests_under_a_parent(parent):
    """With TORAL_INSTALL=ON the rules install toral's files into toral's
    directories (share/doc/toral, not the parent's CMAKE_INSTALL_DOCDIR); with
    TORAL_BUILD_TESTS=ON the tests' sources and commands are toral's."""
    configure(parent["src"], parent["build"], "-DTORAL_INSTALL=ON", "-DTORAL_BUILD_TESTS=ON")
    text = (parent["sub"] / "cmake_install.cmake").read_text()
    dests = set(re.findall(r'file\(INSTALL DESTINATION "\$\{CMAKE_INSTALL_PREFIX\}/([^"]*)"', text))
    assert dests == {"bin", "share/toral/analysis", "share/toral/examples", "share/toral/jobscripts",
                     "share/doc/toral", "share/doc/toral/docs"}, dests
    assert "toral_parent" not in text
    for path in quoted_paths(text):
        assert not path.startswith(str(parent["src"])), path
    installed = [p for p in quoted_paths(text) if p.startswith(str(SOURCE) + "/")]
    assert {os.path.relpath(p, SOURCE).rstrip("/") for p in installed} >= {
        "analysis", "examples", "jobscripts", "docs", "README.md", "DEVELOPERS.md"}, installed

    ctest = (parent["sub"] / "tests" / "CTestTestfile.cmake").read_text()
    assert "jobscript_syntax" in ctest and str(parent["src"]) not in ctest
    assert f"bash -n {SOURCE}/jobscripts/slurm.sbatch" in ctest
    commands = json.loads((parent["build"] / "compile_commands.json").read_text())
    tests = [c for c in commands if c["file"].startswith(str(SOURCE / "tests") + os.sep)]
    assert any(c["file"].endswith("test_multimod.cpp") for c in tests)
    for c in tests:
        for d in include_dirs(c["command"]):
            assert os.path.isdir(d) and not d.startswith(str(parent["src"])), (c["file"], d)

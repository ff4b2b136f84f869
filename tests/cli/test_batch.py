"""Batch life: kill -9 and resume, signals, ranks, shards and merge, job
scripts, ensemble statistics, check's cost probe, progress lines."""
import os
import signal
import subprocess
import time

import h5py
import numpy as np
import pytest

from conftest import ROOT, mpi_env

# Dense points of a few hundredths of a second each, mixed sizes, a disorder
# ensemble (seeds) and a clean ring: long enough to be killed mid-run. The
# drawn gates are hyperbolic (a, b >= 1): with a = 0 some open chains have
# large Jordan blocks whose LAPACK exponents are off by ~0.4 (status 8 beyond
# spectrum.certify_max, or a slow certified recomputation below it).
SLOW = """
title = "batch test"
[[sweep]]
name = "ens"
sites = [96, 160, 224]
boundary = "open"
seeds = { from = 1, to = 10 }
[sweep.bond]
family = "shear2"
a = { draw = [1, 2] }
b = { draw = [1, 2] }

[[sweep]]
name = "clean"
sites = [64, 128]
[sweep.bond]
family = "shear2"
a = [1, 2]
b = 1

[bounds]
regions = [1, 2, 4]
local_dims = [2, 3]

[entanglement]
periods = 12
regions = [2]
stabilizer_dims = [2]

[bands]
grid = 9

[rays]
velocities = 9
"""
NPOINTS = 3 * 10 + 2 * 2

TIMING = {"points/wall_time", "chaos/solver/wall_time", "entanglement/wall_time"}


def write(tmp_path, text, name="c.toml"):
    p = tmp_path / name
    p.write_text(text)
    return p


def read_all(path):
    """Every dataset and root attribute; raises if the file is unreadable."""
    data, attrs = {}, {}
    with h5py.File(path, "r") as f:
        def visit(name, obj):
            if isinstance(obj, h5py.Dataset):
                data[name] = obj[()]
        f.visititems(visit)
        for k in f.attrs:
            attrs[k] = f.attrs[k]
    return data, attrs


def assert_same_results(a, b):
    da, aa = read_all(a)
    db, ab = read_all(b)
    assert sorted(da) == sorted(db)
    for k in da:
        if k in TIMING:
            continue
        np.testing.assert_array_equal(da[k], db[k], err_msg=k)
    for k in ("config", "config_hash", "point_count", "layout_version"):
        assert np.array_equal(np.asarray(aa[k]), np.asarray(ab[k])), k


def make_reference(d, toral, text):
    cfg = write(d, text)
    out = d / "ref.h5"
    t0 = time.time()
    p = subprocess.run([toral, "run", cfg, "-o", out, "-q"], capture_output=True, text=True, env=mpi_env())
    assert p.returncode == 0, p.stderr
    return cfg, out, time.time() - t0


@pytest.fixture(scope="module")
def reference(tmp_path_factory, toral):
    cfg, out, _ = make_reference(tmp_path_factory.mktemp("ref"), toral, SLOW)
    return cfg, out


@pytest.fixture(scope="module")
def timed_reference(tmp_path_factory, toral):
    return make_reference(tmp_path_factory.mktemp("tref"), toral, SLOW)


# Larger points (about a second each) so that a signal surely lands mid-run.
SLOWER = SLOW.replace("sites = [96, 160, 224]", "sites = [700, 800]").replace("to = 10", "to = 5")


@pytest.fixture(scope="module")
def slow_reference(tmp_path_factory, toral):
    cfg, out, _ = make_reference(tmp_path_factory.mktemp("sref"), toral, SLOWER)
    return cfg, out


def start(cmd, **kw):
    return subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=mpi_env(),
                            start_new_session=True, **kw)


def wait_for_finished_point(journal, proc, timeout=120.0):
    """Block until the run's journal holds at least one finished point.

    A fixed sleep is a guess about the machine's speed (a slow CI machine
    finished nothing in one second); the journal is the run's own record.
    Its header is 8 magic + 4 version + 4 n + n config hash + 4 m + m schema
    hash + 8 total + 8 checksum bytes (io/journal.hpp); anything beyond it is
    a point frame."""
    t_end = time.time() + timeout
    while time.time() < t_end:
        assert proc.poll() is None, "the run ended before any point was journalled"
        try:
            raw = journal.read_bytes()
        except FileNotFoundError:
            raw = b""
        if len(raw) >= 16:
            n = int.from_bytes(raw[12:16], "little")
            if len(raw) >= 20 + n:
                m = int.from_bytes(raw[16 + n:20 + n], "little")
                if len(raw) > 36 + n + m:
                    return
        time.sleep(0.02)
    raise AssertionError(f"no point finished within {timeout} s")


@pytest.mark.parametrize("fraction", [0.01, 0.03, 0.07, 0.12, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8, 0.9])
def test_kill9_then_resume_equals_uninterrupted(tmp_path, toral, timed_reference, fraction):
    # Twelve kill moments spread over the run (fractions of the measured
    # uninterrupted time), including kills during checkpoint writes.
    cfg, ref, seconds = timed_reference
    delay = fraction * seconds
    out = tmp_path / "r.h5"
    # --checkpoint 0 rewrites the file as often as possible: kills land during writes too.
    p = start([toral, "run", str(cfg), "-o", str(out), "-q", "--checkpoint", "0"])
    time.sleep(delay)
    os.killpg(p.pid, signal.SIGKILL)
    p.wait()
    if out.exists():
        data, attrs = read_all(out)  # never unreadable
        assert data["points/status"].shape == (NPOINTS,)
        assert attrs["config_hash"]
    leftovers = [x.name for x in tmp_path.iterdir() if ".partial" in x.name]
    r = subprocess.run([toral, "run", str(cfg), "-o", str(out), "-q", "--resume"], capture_output=True, text=True,
                       env=mpi_env())
    assert r.returncode == 0, r.stderr
    assert not (tmp_path / "r.h5.journal").exists()
    assert_same_results(ref, out)
    del leftovers  # a kill during a write may leave a temporary sibling; it is never the result file


@pytest.mark.parametrize("delay", [0.3, 1.0])
def test_kill9_on_two_ranks_then_resume(tmp_path, toral, reference, delay):
    cfg, ref = reference
    out = tmp_path / "r.h5"
    p = start(["mpiexec", "--oversubscribe", "-n", "2", toral, "run", str(cfg), "-o", str(out), "-q",
               "--checkpoint", "0.05"])
    time.sleep(delay)
    os.killpg(p.pid, signal.SIGKILL)
    p.wait()
    if out.exists():
        read_all(out)
    r = subprocess.run(["mpiexec", "--oversubscribe", "-n", "2", toral, "run", str(cfg), "-o", str(out), "-q",
                        "--resume"], capture_output=True, text=True, env=mpi_env())
    assert r.returncode == 0, r.stderr
    assert_same_results(ref, out)


def test_sigterm_gives_clean_checkpoint_and_exit_code_3(tmp_path, toral, slow_reference):
    cfg, ref = slow_reference
    out = tmp_path / "t.h5"
    p = start([toral, "run", str(cfg), "-o", str(out), "-q"])
    wait_for_finished_point(tmp_path / "t.h5.journal", p)
    t0 = time.time()
    p.send_signal(signal.SIGTERM)
    _, err = p.communicate(timeout=30)
    assert time.time() - t0 < 10
    assert p.returncode == 3, err
    assert "resume" in err
    data, _ = read_all(out)
    status = data["points/status"]
    assert (status == 6).any() and (status == 0).any()  # pending and done points
    assert (tmp_path / "t.h5.journal").exists()
    r = subprocess.run([toral, "run", str(cfg), "-o", str(out), "-q", "--resume"], capture_output=True, text=True,
                       env=mpi_env())
    assert r.returncode == 0, r.stderr
    assert_same_results(ref, out)


def test_sigusr1_under_mpiexec_gives_clean_file(tmp_path, toral, slow_reference):
    cfg, ref = slow_reference
    out = tmp_path / "u.h5"
    p = start(["mpiexec", "--oversubscribe", "-n", "2", toral, "run", str(cfg), "-o", str(out), "-q"])
    wait_for_finished_point(tmp_path / "u.h5.journal", p)
    t0 = time.time()
    p.send_signal(signal.SIGUSR1)  # mpiexec forwards SIGUSR1 to the ranks
    _, err = p.communicate(timeout=30)
    assert time.time() - t0 < 10
    assert p.returncode == 3, err  # mpiexec passes the ranks' exit code on
    data, _ = read_all(out)
    assert (data["points/status"] == 6).any()
    r = subprocess.run([toral, "run", str(cfg), "-o", str(out), "-q", "--resume"], capture_output=True, text=True,
                       env=mpi_env())
    assert r.returncode == 0, r.stderr
    assert_same_results(ref, out)


def test_resume_refuses_another_config_and_stray_journal(tmp_path, run_toral, toral, slow_reference):
    cfg, _ = slow_reference
    out = tmp_path / "s.h5"
    p = start([toral, "run", str(cfg), "-o", str(out), "-q"])
    wait_for_finished_point(tmp_path / "s.h5.journal", p)
    p.send_signal(signal.SIGTERM)
    p.communicate(timeout=30)
    assert p.returncode == 3
    other = write(tmp_path, SLOWER.replace("to = 5", "to = 4"), "other.toml")
    r = run_toral("run", other, "-o", out, "--resume")
    assert r.returncode == 2 and "different config" in r.stderr
    r = run_toral("run", cfg, "-o", out)
    assert r.returncode == 2
    r = run_toral("run", cfg, "-o", out, "--overwrite", "-q")
    assert r.returncode == 0, r.stderr


@pytest.mark.parametrize("ranks", [1, 2, 3])
def test_one_two_three_ranks_identical(tmp_path, run_toral, reference, ranks):
    cfg, ref = reference
    out = tmp_path / f"n{ranks}.h5"
    run_toral("run", cfg, "-o", out, "-q", ranks=ranks, check=True)
    assert_same_results(ref, out)


def test_shards_and_merge_equal_single_run(tmp_path, run_toral, reference):
    cfg, ref = reference
    shards = []
    for i in range(3):
        s = tmp_path / f"s{i}.h5"
        run_toral("run", cfg, "-o", s, "-q", "--shard", f"{i}/3", ranks=2 if i == 1 else None, check=True)
        with h5py.File(s) as f:
            assert f.attrs["shard"] == f"{i}/3"
            assert np.all(f["points/index"][()] % 3 == i)
        shards.append(s)
    merged = tmp_path / "m.h5"
    run_toral("merge", merged, *reversed(shards), check=True)
    assert_same_results(ref, merged)


def one_line_error(p, fragment):
    assert p.returncode == 2, (p.returncode, p.stderr)
    lines = [l for l in p.stderr.splitlines() if l.strip()]
    assert len(lines) == 1 and fragment in lines[0], p.stderr


def test_merge_refuses_bad_inputs(tmp_path, run_toral, reference):
    cfg, _ = reference
    s = [tmp_path / f"s{i}.h5" for i in range(2)]
    for i in range(2):
        run_toral("run", cfg, "-o", s[i], "-q", "--shard", f"{i}/2", check=True)
    out = tmp_path / "m.h5"
    one_line_error(run_toral("merge", out, s[0]), "points are in no input")
    one_line_error(run_toral("merge", out, s[0], s[1], s[0]), "is also in")
    other = write(tmp_path, SLOW.replace("to = 10", "to = 9"), "other.toml")
    o = tmp_path / "o.h5"
    run_toral("run", other, "-o", o, "-q", "--shard", "1/2", check=True)
    one_line_error(run_toral("merge", out, s[0], o), "different config")
    broken = tmp_path / "broken.h5"
    broken.write_bytes(s[1].read_bytes()[: s[1].stat().st_size // 2])
    one_line_error(run_toral("merge", out, s[0], broken), "broken.h5")
    junk = tmp_path / "junk.h5"
    junk.write_text("not hdf5")
    one_line_error(run_toral("merge", out, s[0], junk), "junk.h5")
    assert not out.exists() and not list(tmp_path.glob("m.h5*"))
    run_toral("merge", out, s[0], s[1], check=True)


def test_ensemble_stats_match_numpy(tmp_path, reference):
    _, ref = reference
    with h5py.File(ref) as f:
        names = [n for n in f["points"].attrs["parameters"] if n != "seed"]
        pts = {n: f["points"][n][()] for n in names}
        seed = f["points/seed"][()]
        status = f["points/status"][()]
        lam = f["chaos/lambda_max"][()]
        lyap = f["bounds/lyapunov_rate"][()]
        st = f["stats"]
        groups = {n: st[n][()] for n in names}
        count = st["count"][()]
        checked = 0
        for g in range(len(count)):
            sel = (seed != np.iinfo(np.int64).min) & (status == 0)
            for n in names:
                sel &= pts[n] == groups[n][g]
            assert count[g] == sel.sum()
            # numpy is the reference library: mean, std(ddof=1), sem, median
            v = lam[sel]
            assert st["lambda_max/mean"][g] == pytest.approx(np.mean(v), rel=1e-13)
            assert st["lambda_max/std"][g] == pytest.approx(np.std(v, ddof=1), rel=1e-12)
            assert st["lambda_max/sem"][g] == pytest.approx(np.std(v, ddof=1) / np.sqrt(len(v)), rel=1e-12)
            assert st["lambda_max/median"][g] == pytest.approx(np.median(v), rel=1e-14)
            np.testing.assert_allclose(st["lyapunov_rate/mean"][g], lyap[sel].mean(axis=0), rtol=1e-13)
            checked += 1
        assert checked == 3  # one group per size of the seeded sweep


def test_jobscripts_are_valid_and_safely_quoted(tmp_path, run_toral, toral):
    evil_dir = tmp_path / "dir with space; $(touch PWNED) `x`"
    evil_dir.mkdir()
    cfg = evil_dir / "it's a config.toml"
    cfg.write_text(SLOW)
    out = evil_dir / "out \"q\".h5"
    for sched in ("slurm", "pbs"):
        script = tmp_path / f"job.{sched}"
        run_toral("jobscript", cfg, "-o", out, "--scheduler", sched, "--ranks", 4, "--walltime", "0-02:00:00",
                  "--partition", "short", "--shards", 3, "--toral", toral, "--script", script, check=True)
        text = script.read_text()
        assert subprocess.run(["bash", "-n", str(script)]).returncode == 0
        assert "--resume" in text and "journal" in text
        if sched == "slurm":
            assert "#SBATCH --signal=TERM@300" in text and "#SBATCH --array=0-2" in text and "scontrol requeue" in text
        else:
            assert "#PBS -J 0-2" in text and "timeout --signal=TERM" in text and "qrerun" in text
    # Bad values are refused, not written into directives.
    one_line_error(run_toral("jobscript", cfg, "-o", out, "--partition", "a;b"), "--partition")
    one_line_error(run_toral("jobscript", cfg, "-o", out, "--walltime", "2h"), "--walltime")
    # Run the Slurm script for shard 1 with stand-ins for srun and scontrol.
    bindir = tmp_path / "bin"
    bindir.mkdir()
    (bindir / "srun").write_text('#!/bin/sh\nexec "$@"\n')
    (bindir / "scontrol").write_text('#!/bin/sh\necho requeue "$@" >> "$REQUEUE_LOG"\n')
    for b in bindir.iterdir():
        b.chmod(0o755)
    env = mpi_env()
    env.update(PATH=f"{bindir}:{env['PATH']}", SLURM_ARRAY_TASK_ID="1", SLURM_JOB_ID="77",
               REQUEUE_LOG=str(tmp_path / "requeue.log"))
    p = subprocess.run(["bash", str(tmp_path / "job.slurm")], capture_output=True, text=True, env=env, cwd=tmp_path)
    assert p.returncode == 0, p.stderr
    assert not (tmp_path / "PWNED").exists() and not (evil_dir / "PWNED").exists()
    shard = evil_dir / "out \"q\".shard1of3.h5"
    with h5py.File(shard) as f:
        assert f.attrs["shard"] == "1/3"
    assert not (tmp_path / "requeue.log").exists()  # finished: no requeue


def test_check_probes_and_refuses_what_cannot_fit(tmp_path, run_toral):
    big = write(tmp_path, "[[sweep]]\nsites = 3000\nboundary = \"open\"\nseeds = [1]\n[sweep.bond]\n"
                          "family = \"shear2\"\na = { draw = [-1, 1] }\nb = 1\n")
    p = run_toral("check", big, check=True)
    assert "probe on this machine" in p.stdout and "core-seconds" in p.stdout
    one_line_error(run_toral("check", big, "--memory-per-rank", "0.1"), "--memory-per-rank")


def test_progress_lines_in_batch_logs_and_quiet(tmp_path, run_toral, reference):
    cfg, _ = reference
    p = run_toral("run", cfg, "-o", tmp_path / "p.h5", "--progress-every", "0", check=True)
    lines = [l for l in p.stderr.splitlines() if l.startswith("toral:") and "points" in l]
    assert len(lines) >= 2 and f"{NPOINTS}/{NPOINTS} points" in lines[-1] and "\r" not in p.stderr
    assert "ETA" in lines[0] and "failed" in lines[0]
    q = run_toral("run", cfg, "-o", tmp_path / "q.h5", "-q", check=True)
    assert "points/s" not in q.stderr

"""Faults outside the input: a full or read-only disk, Ctrl-C and kills, a busy target, an
unsafe Prefect home. Each ends with its own exit code (3 runtime fault, 130/143 interrupted,
2 refused), one ``error:`` line, no traceback, and no earlier output lost.

The tiny file systems are tmpfs mounts, which need root: without it those tests are skipped
(stated in the skip reason). Exit codes 128 + signal number are the POSIX shells' convention
(common practice)."""

from __future__ import annotations

import copy
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
from cli_helpers import assert_clean_error, error_lines, invoke
from conftest import DEMO_TYPED, write_toml

ROOT_ONLY = "mounting a tmpfs needs root (run the suite as root to test disk-full and read-only faults)"


def _mount(where: Path, options: str) -> None:
    where.mkdir(parents=True, exist_ok=True)
    done = subprocess.run(["mount", "-t", "tmpfs", "-o", options, "tmpfs", str(where)], capture_output=True, text=True)
    if done.returncode != 0:
        pytest.skip(f"cannot mount a tmpfs here ({done.stderr.strip()}): {ROOT_ONLY}")


@pytest.fixture
def tiny_fs(tmp_path):
    """A 5 MB tmpfs, unmounted afterwards."""
    if os.geteuid() != 0:
        pytest.skip(ROOT_ONLY)
    where = tmp_path / "tiny"
    _mount(where, "size=5m,mode=0755")
    yield where
    subprocess.run(["umount", "-l", str(where)], check=False)


def _fill(folder: Path) -> None:
    """Fill the file system of ``folder`` to the last byte (unbuffered writes, smaller and
    smaller)."""
    fd = os.open(folder / "filler", os.O_WRONLY | os.O_CREAT)
    try:
        for size in (1 << 20, 1 << 16, 1 << 12, 1 << 8, 1):
            try:
                while True:
                    os.write(fd, b"\0" * size)
            except OSError:
                pass
    finally:
        os.close(fd)


def _config(tmp_path: Path, demo: dict, **simulation) -> Path:
    data = copy.deepcopy(demo)
    data["simulation"].update(simulation)
    return write_toml(tmp_path / "run.toml", data)


def _pqflow(*args, env: dict[str, str] | None = None, **kw) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "pqflow.cli", *map(str, args)], capture_output=True, text=True,
                          env={**os.environ, **(env or {})}, **kw)


def _harness_url() -> str:
    from prefect.settings import PREFECT_API_URL

    return PREFECT_API_URL.value()


# --------------------------------------------------------------------- 8, 12. disk faults

@pytest.mark.flow
def test_disk_full_during_a_run_exits_3_and_keeps_the_earlier_run(prefect_harness, tiny_fs, tmp_path, demo_config_dict):
    from pqflow.pipeline import run_in_process
    from pqflow.storage.manifest import verify_run

    out = tiny_fs / "q3"
    run_in_process(_config(tmp_path, demo_config_dict, scenarios=20, batch_size=20, horizon_years=10), out)
    verify_run(out)
    before = sorted(p.relative_to(tiny_fs) for p in tiny_fs.rglob("*"))
    big = _config(tmp_path, demo_config_dict, scenarios=4000, batch_size=500)  # about 30 MB per set
    # The whole command in its own process, talking to the session's Prefect server: what a
    # user sees on the terminal, Prefect's own log lines included.
    done = _pqflow("run", big, "--out", out, "--overwrite", env={"PREFECT_API_URL": _harness_url()}, timeout=300)
    text = done.stdout + done.stderr
    assert done.returncode == 3, text
    assert "Traceback" not in text, text
    lines = error_lines(done.stderr)
    assert len(lines) == 1 and "no space left" in lines[0] and str(tiny_fs) in lines[0], text
    verify_run(out)  # the earlier run, untouched
    assert sorted(p.relative_to(tiny_fs) for p in tiny_fs.rglob("*")) == before  # no staging, lock or part left


def test_disk_full_in_calibrate_and_value_exits_3_and_leaves_nothing(tiny_fs, tmp_path, demo_config_dict):
    from conftest import REPO

    from pqflow.pipeline import run_in_process

    run = tiny_fs / "run"
    run_in_process(_config(tmp_path, demo_config_dict, scenarios=20, batch_size=20), run)
    _fill(tiny_fs)
    before = sorted(p.relative_to(tiny_fs) for p in tiny_fs.rglob("*"))
    assert_clean_error(invoke("calibrate", DEMO_TYPED, "--out", tiny_fs / "calibration.json"), 3, "no space left")
    result = invoke("value", run, "--liabilities", REPO / "scenario_configs" / "demo_liabilities.toml")
    assert_clean_error(result, 3, "no space left", str(run / "valuation"))
    assert sorted(p.relative_to(tiny_fs) for p in tiny_fs.rglob("*")) == before  # no .tmp file, no half valuation


def test_read_only_target_exits_3_before_any_work(tmp_path, monkeypatch):
    if os.geteuid() != 0:
        pytest.skip(ROOT_ONLY)
    ro = tmp_path / "ro"
    _mount(ro, "size=1m,ro")
    try:
        monkeypatch.setattr("pqflow.calibration.assemble.assemble_calibration", _must_not_run)
        assert_clean_error(invoke("run", DEMO_TYPED, "--out", ro / "q3"), 3, "read-only", str(ro))
        assert not list(ro.iterdir())
    finally:
        subprocess.run(["umount", "-l", str(ro)], check=False)


# ------------------------------------------------------------------- 11. lock before work

def _must_not_run(*args, **kwargs):
    raise AssertionError("work started although the target was not usable")


def test_a_busy_target_is_refused_before_calibration_and_prefect(tmp_path, monkeypatch):
    import pqflow.pipeline as pipeline
    from pqflow.storage.rundir import acquire_lock, lock_path, release_lock

    out = tmp_path / "q3"
    lock = acquire_lock(lock_path(out))  # a live run (this process) holds the target
    monkeypatch.setattr("pqflow.calibration.assemble.assemble_calibration", _must_not_run)
    monkeypatch.setattr(pipeline, "run_quarterly", _must_not_run)
    try:
        started = time.perf_counter()
        assert_clean_error(invoke("run", "scenario_configs/demo.toml", "--out", out), 2,
                           str(out), f"pid {os.getpid()}", str(lock))
        assert time.perf_counter() - started < 5  # used to take 21 s (calibration, server start)
        assert lock.exists() and not out.exists()
    finally:
        release_lock(lock)


# ------------------------------------------------------------------- 15. Prefect's home

@pytest.mark.parametrize("fault", ["other_owner", "group_writable", "world_writable", "symlink", "foreign_profile"])
def test_an_unsafe_prefect_home_is_refused(tmp_path, monkeypatch, fault):
    home = tmp_path / "prefect-home"
    home.mkdir(mode=0o700)
    if fault in ("other_owner", "foreign_profile") and os.geteuid() != 0:
        pytest.skip("giving a folder to another user needs root")
    if fault == "other_owner":
        os.chown(home, 65534, 65534)
    elif fault == "group_writable":
        home.chmod(0o770)
    elif fault == "world_writable":
        home.chmod(0o777)
    elif fault == "symlink":
        real = tmp_path / "elsewhere"
        real.mkdir(mode=0o700)
        home.rmdir()
        home.symlink_to(real)
    else:
        profile = home / "profiles.toml"
        profile.write_text('active = "x"\n[profiles.x]\nPREFECT_API_URL = "http://attacker.invalid/api"\n')
        os.chown(profile, 65534, 65534)
    monkeypatch.setenv("PREFECT_HOME", str(home))
    monkeypatch.setattr("pqflow.calibration.assemble.assemble_calibration", _must_not_run)
    out = tmp_path / "q3"
    assert_clean_error(invoke("run", DEMO_TYPED, "--out", out), 3, str(home), "PREFECT_HOME")
    assert not out.exists() and not list(tmp_path.glob(".q3*"))


def test_a_missing_prefect_home_is_created_owner_only(tmp_path):
    from pqflow.pipeline.home import check_prefect_home

    home = tmp_path / "fresh" / "prefect"
    assert check_prefect_home(home) == home
    assert (home.stat().st_mode & 0o777) == 0o700 and home.stat().st_uid == os.getuid()
    check_prefect_home(home)  # found again: accepted


# ----------------------------------------------------------- 9, 10. signals and the server

def _children(pid: int) -> list[int]:
    kids = []
    for stat in Path("/proc").glob("[0-9]*/stat"):
        try:
            fields = stat.read_text().rsplit(")", 1)[1].split()
        except OSError:
            continue
        if int(fields[1]) == pid:
            kids.append(int(stat.parent.name))
    return kids


def _alive(pid: int) -> bool:
    """Running (a zombie waiting to be reaped by init does not count: it holds no port)."""
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except OSError:
        return False
    return state != "Z"


@pytest.mark.skipif(not sys.platform.startswith("linux"),
                    reason="reads /proc; the server's tie to its parent is Linux's prctl")
def test_signals_end_the_run_promptly_and_take_the_server_along(tmp_path, demo_config_dict):
    # Two real runs at once, each with its own temporary Prefect server (no harness): Ctrl-C to
    # the whole process group, and SIGKILL, sent while parts are being written. SIGTERM takes
    # the Ctrl-C path (test below); before its handler is installed it kills like SIGKILL.
    cfg = _config(tmp_path, demo_config_dict, scenarios=30000,
                  batch_size=200)  # 300 parts: still running when signalled
    runs = {}
    for name, sig in (("int", signal.SIGINT), ("kill", signal.SIGKILL)):
        out = tmp_path / name
        env = {**os.environ, "PREFECT_HOME": str(tmp_path / f"home-{name}")}
        env.pop("PREFECT_API_URL", None)
        proc = subprocess.Popen([sys.executable, "-m", "pqflow.cli", "run", str(cfg), "--out", str(out), "--scenarios",
                                 "30000"],
                                stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env,
                                start_new_session=True)  # its own process group, as a terminal job
        runs[name] = (proc, sig, out)
    try:
        servers = {}
        deadline = time.monotonic() + 300  # two server starts at once on a loaded machine
        for name, (proc, _sig, _out) in runs.items():
            progress = tmp_path / f".{name}.staging" / ".progress.jsonl"
            while time.monotonic() < deadline:  # a part recorded: server up, parts in flight
                if progress.exists() and len(progress.read_text().splitlines()) >= 2:
                    break
                assert proc.poll() is None, proc.communicate()
                time.sleep(0.1)
            servers[name] = [k for k in _children(proc.pid) if "uvicorn" in Path(f"/proc/{k}/cmdline").read_text()]
            assert len(servers[name]) == 1, name
        sent = {}
        for name, (proc, sig, _out) in runs.items():
            if sig == signal.SIGINT:
                os.killpg(proc.pid, sig)  # what Ctrl-C in a terminal does
            else:
                os.kill(proc.pid, sig)
            sent[name] = time.monotonic()
        for name, (proc, sig, out) in runs.items():
            stdout, stderr = proc.communicate(timeout=60)
            took = time.monotonic() - sent[name]
            text = stdout + stderr
            if sig == signal.SIGKILL:
                assert proc.returncode == -signal.SIGKILL
            else:
                assert proc.returncode == 128 + sig, text
                assert took < 20, took  # used to take 73 s of retries
                assert "Traceback" not in text and "connection" not in text.lower(), text
                lines = error_lines(stderr)
                assert len(lines) == 1 and "interrupted" in lines[0], text
                assert f"pqflow run {cfg} --out {out} --scenarios 30000 --resume" in lines[0], text  # all it needs
                assert not (tmp_path / f".{name}.lock").exists()  # lock released
                assert (tmp_path / f".{name}.staging" / ".progress.jsonl").exists()  # kept for --resume
            assert not out.exists()
        for name, pids in servers.items():  # no temporary server outlives its run
            deadline = time.monotonic() + 10
            while any(_alive(p) for p in pids) and time.monotonic() < deadline:
                time.sleep(0.1)
            assert not any(_alive(p) for p in pids), name
    finally:
        for proc, _, _ in runs.values():
            if proc.poll() is None:
                proc.kill()
                proc.communicate()


def test_sigterm_unwinds_like_ctrl_c_with_exit_143():
    from pqflow.cli_errors import interrupt_exit_code, terminate_as_interrupt

    with pytest.raises(KeyboardInterrupt):
        with terminate_as_interrupt():
            os.kill(os.getpid(), signal.SIGTERM)
            time.sleep(5)  # the handler interrupts this
    assert interrupt_exit_code() == 128 + signal.SIGTERM
    assert signal.getsignal(signal.SIGTERM) is signal.SIG_DFL  # handler removed after the block


def test_dask_workers_leave_ctrl_c_to_the_run(tmp_path):
    # Ctrl-C reaches every process of the terminal's group; a local Dask worker must not die
    # of it (printing its own traceback) but wait for the run to close the cluster.
    distributed = pytest.importorskip("distributed")
    from pqflow.pipeline.flows import local_cluster_without_ctrl_c

    before = signal.getsignal(signal.SIGINT)
    cluster = local_cluster_without_ctrl_c(n_workers=1, processes=True, threads_per_worker=1,
                                           dashboard_address=":0", local_directory=str(tmp_path))
    try:
        assert signal.getsignal(signal.SIGINT) is before  # the run itself still hears Ctrl-C
        with distributed.Client(cluster) as client:
            (pid,) = client.run(os.getpid).values()
            os.kill(pid, signal.SIGINT)
            time.sleep(1.0)
            assert list(client.run(os.getpid).values()) == [pid]  # the same worker, still serving
    finally:
        cluster.close()

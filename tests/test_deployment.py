"""The quarterly run as Prefect users run it: a real server, a deployment, a process worker.

Everything runs in subprocesses against a ``prefect server start`` on a free loopback port with
its own PREFECT_HOME, so this test process's Prefect settings are never touched. Every wait is
bounded and every process started here is killed (by its process group) in a finally block.
The run's files are checked against its manifest (sha256, FIPS 180-4, via hashlib in
``verify_run``); the flow runs' states are read from the server's REST API.
"""

from __future__ import annotations

import datetime as dt
import json
import os
import signal
import socket
import subprocess
import sys
import time
import urllib.error
import urllib.request
from pathlib import Path
from zoneinfo import ZoneInfo

import pytest

from pqflow.storage.manifest import verify_run

pytestmark = pytest.mark.deployment

BIN = Path(sys.executable).parent
REPO = Path(__file__).resolve().parents[1]
SERVER_START_TIMEOUT = 150  # seconds; the machine may be shared and slow
RUN_TIMEOUT = 300


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _env(home: Path, api_url: str | None) -> dict[str, str]:
    env = {k: v for k, v in os.environ.items() if not k.startswith("PREFECT_")}
    env.update({
        "PREFECT_HOME": str(home),
        "PREFECT_SERVER_ANALYTICS_ENABLED": "false",
        "DO_NOT_TRACK": "1",
        "PREFECT_LOGGING_LEVEL": "WARNING",
        "PREFECT_SERVER_UI_ENABLED": "false",
    })
    if api_url:
        env["PREFECT_API_URL"] = api_url
    return env


def _stop(proc: subprocess.Popen) -> None:
    """Stop a process started here and everything it started (its own process group)."""
    if proc.poll() is None:
        try:
            os.killpg(proc.pid, signal.SIGTERM)
            proc.wait(timeout=20)
        except (ProcessLookupError, subprocess.TimeoutExpired):
            pass
    try:
        os.killpg(proc.pid, signal.SIGKILL)  # children left in the group
    except ProcessLookupError:
        pass
    proc.wait(timeout=20)


def _api(url: str, path: str, body: dict | None = None):
    data = None if body is None else json.dumps(body).encode()
    req = urllib.request.Request(url + path, data=data, method="GET" if body is None else "POST",
                                 headers={"Content-Type": "application/json"})
    with urllib.request.urlopen(req, timeout=10) as resp:
        return json.loads(resp.read())


def _utc(text: str) -> dt.datetime:
    return dt.datetime.fromisoformat(text.replace("Z", "+00:00")).astimezone(dt.UTC)


def _next_quarter_start(zone: str) -> dt.datetime:
    """06:00 local time on the next 1 January, April, July or October, in UTC."""
    tz = ZoneInfo(zone)
    now = dt.datetime.now(tz)
    candidates = [dt.datetime(y, m, 1, 6, tzinfo=tz) for y in (now.year, now.year + 1) for m in (1, 4, 7, 10)]
    return min(c for c in candidates if c > now).astimezone(dt.UTC)


def _api_status(url: str, path: str) -> int:
    try:
        with urllib.request.urlopen(url + path, timeout=10) as resp:
            return resp.status
    except urllib.error.HTTPError as exc:
        return exc.code


def _flow_runs(url: str) -> list[dict]:
    return _api(url, "/flow_runs/filter", {"limit": 50})


@pytest.fixture(scope="module")
def prefect_server(tmp_path_factory):
    """A Prefect server on a free loopback port; yields (api_url, its PREFECT_HOME)."""
    home = tmp_path_factory.mktemp("prefect-server-home")
    port = _free_port()
    url = f"http://127.0.0.1:{port}/api"
    log = open(home / "server.log", "wb")
    proc = subprocess.Popen(
        [str(BIN / "prefect"), "server", "start", "--host", "127.0.0.1", "--port", str(port)],
        env=_env(home, None), cwd=home, stdout=log, stderr=subprocess.STDOUT, start_new_session=True,
    )
    try:
        deadline = time.monotonic() + SERVER_START_TIMEOUT
        while True:
            if proc.poll() is not None:
                raise AssertionError(f"prefect server exited: {(home / 'server.log').read_text()[-3000:]}")
            try:
                if _api(url, "/health") is True:
                    break
            except OSError:
                pass
            if time.monotonic() > deadline:
                raise AssertionError(f"prefect server not healthy after {SERVER_START_TIMEOUT} s")
            time.sleep(0.5)
        yield url, home
    finally:
        _stop(proc)
        log.close()


def _run(args: list[str], env: dict[str, str], cwd: Path, timeout: float = RUN_TIMEOUT) -> subprocess.CompletedProcess:
    proc = subprocess.Popen(args, env=env, cwd=cwd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            start_new_session=True)
    try:
        out, err = proc.communicate(timeout=timeout)
    except subprocess.TimeoutExpired:
        _stop(proc)
        out, err = proc.communicate()
        raise AssertionError(f"{args[:3]} did not finish in {timeout} s:\n{out}\n{err}") from None
    finally:
        _stop(proc)
    return subprocess.CompletedProcess(args, proc.returncode, out, err)


def test_deploy_trigger_and_a_worker_runs_it(prefect_server, small_config, tmp_path):
    url, home = prefect_server
    env = _env(home, url)
    cfg = small_config(simulation={"scenarios": 200, "batch_size": 100, "horizon_years": 10},
                       real_world={"target_year": 10})
    out_root = tmp_path / "quarters"
    elsewhere = tmp_path / "cwd"  # the worker and the CLI run outside the repository
    elsewhere.mkdir()
    pool = "pqflow"  # created by `pqflow deploy`; the prefect.yaml test below uses it too

    deployed = _run([str(BIN / "pqflow"), "deploy", str(cfg), "--out-root", str(out_root), "--pool", pool,
                     "--name", "cli-test", "--timezone", "Europe/Amsterdam"], env, elsewhere)
    assert deployed.returncode == 0, deployed.stdout + deployed.stderr
    assert "scheduled-quarterly-run/cli-test" in deployed.stdout

    deployment = _api(url, "/deployments/name/scheduled-quarterly-run/cli-test")
    assert deployment["work_pool_name"] == pool
    assert deployment["entrypoint"] == "pqflow.pipeline.deployments.scheduled_quarterly_run"
    assert deployment["parameters"]["config_path"] == str(cfg)
    assert deployment["parameters"]["out_root"] == str(out_root)
    [sched] = deployment["schedules"]
    assert sched["schedule"]["cron"] == "0 6 1 1,4,7,10 *"
    assert sched["schedule"]["timezone"] == "Europe/Amsterdam"
    assert _api(url, f"/work_pools/{pool}")["type"] == "process"

    # Trigger one run now (what the UI's "Quick run" does), then a worker takes it and exits.
    trigger = _run([str(BIN / "prefect"), "deployment", "run", "scheduled-quarterly-run/cli-test"], env, elsewhere)
    assert trigger.returncode == 0, trigger.stdout + trigger.stderr
    worker = _run([str(BIN / "prefect"), "worker", "start", "--pool", pool, "--type", "process", "--run-once"],
                  env, elsewhere)
    assert worker.returncode == 0, worker.stdout + worker.stderr

    runs = _flow_runs(url)
    ours = [r for r in runs if r["deployment_id"] == deployment["id"]]
    done = [r for r in ours if r["state_type"] != "SCHEDULED"]
    assert [r["state_type"] for r in done] == ["COMPLETED"], (runs, worker.stdout[-3000:], worker.stderr[-3000:])
    sub = [r for r in runs if r["parent_task_run_id"] is not None]
    assert [r["state_type"] for r in sub] == ["COMPLETED"]  # quarterly_run, as a subflow
    # The server's scheduler placed the next run at 06:00 Amsterdam time on the first day of the
    # next quarter; the expected instant comes from the IANA time zone database (zoneinfo).
    # (The scheduler service picks a new deployment up within seconds; wait at most 90 s.)
    deadline = time.monotonic() + 90
    while not (scheduled := sorted(r["expected_start_time"] for r in _flow_runs(url)
                                   if r["deployment_id"] == deployment["id"] and r["state_type"] == "SCHEDULED")):
        assert time.monotonic() < deadline, "the server scheduled no run of the deployment"
        time.sleep(2)
    assert _utc(scheduled[0]) == _next_quarter_start("Europe/Amsterdam")
    run_dir = out_root / "2026-09-30"  # the configuration's valuation date
    manifest = verify_run(run_dir)
    assert manifest["seeds"]["root_seed"] == 20260930
    assert sum(f["path"].startswith("scenarios/") for f in manifest["files"]) == 4  # 2 parts per set
    # no check fails (cells without the power to judge are inconclusive, not passes)
    assert json.loads((run_dir / "validation" / "summary.json").read_text())["verdict"] in ("pass", "inconclusive")
    # Progress lines reached the worker's log (no terminal there), and the UI has the artifacts.
    assert "progress: 4 of 4 parts generated" in worker.stdout
    artifacts = {a["key"]: a for a in _api(url, "/artifacts/filter", {"limit": 50}) if a.get("key")}
    assert artifacts["pqflow-scenario-parts"]["type"] == "progress"
    assert float(artifacts["pqflow-scenario-parts"]["data"]) == 100.0
    assert {"pqflow-validation-summary", "pqflow-verdicts"} <= artifacts.keys()


def test_prefect_yaml_deploys_the_same_flow(prefect_server, small_config, tmp_path):
    # `prefect deploy --all` in the project folder, as the comments in prefect.yaml say; the
    # run is triggered with this test's configuration and output folder as parameters.
    url, home = prefect_server
    env = _env(home, url)
    env["PWD"] = str(REPO)  # what a shell in the project folder sets
    if _api_status(url, "/work_pools/pqflow") == 404:  # else made by the `pqflow deploy` test
        pool = _run([str(BIN / "prefect"), "work-pool", "create", "pqflow", "--type", "process"], env, REPO)
        assert pool.returncode == 0, pool.stdout + pool.stderr
    deployed = _run([str(BIN / "prefect"), "--no-prompt", "deploy", "--all"], env, REPO)
    assert deployed.returncode == 0, deployed.stdout + deployed.stderr
    deployment = _api(url, "/deployments/name/scheduled-quarterly-run/quarterly")
    assert deployment["parameters"] == {"config_path": str(REPO / "scenario_configs" / "demo.toml"),
                                        "out_root": str(REPO / "runs" / "quarters")}
    assert deployment["pull_steps"] == [
        {"prefect.deployments.steps.set_working_directory": {"directory": str(REPO)}}]
    [sched] = deployment["schedules"]
    assert (sched["schedule"]["cron"], sched["schedule"]["timezone"]) == ("0 6 1 1,4,7,10 *", "UTC")

    cfg = small_config(simulation={"scenarios": 200, "batch_size": 100, "horizon_years": 10},
                       real_world={"target_year": 10})
    out_root = tmp_path / "quarters"
    trigger = _run([str(BIN / "prefect"), "deployment", "run", "scheduled-quarterly-run/quarterly",
                    "-p", f"config_path={json.dumps(str(cfg))}", "-p", f"out_root={json.dumps(str(out_root))}"],
                   env, tmp_path)
    assert trigger.returncode == 0, trigger.stdout + trigger.stderr
    worker = _run([str(BIN / "prefect"), "worker", "start", "--pool", "pqflow", "--run-once"], env, tmp_path)
    assert worker.returncode == 0, worker.stdout + worker.stderr
    runs = [r for r in _flow_runs(url) if r["deployment_id"] == deployment["id"] and r["state_type"] != "SCHEDULED"]
    assert [r["state_type"] for r in runs] == ["COMPLETED"], (worker.stdout[-3000:], worker.stderr[-3000:])
    verify_run(out_root / "2026-09-30")
    assert not (REPO / "runs" / "quarters").exists()


def test_pqflow_run_uses_the_server_in_PREFECT_API_URL(prefect_server, small_config, tmp_path):
    url, home = prefect_server
    before = {r["id"] for r in _flow_runs(url)}
    cfg = small_config(simulation={"scenarios": 200, "batch_size": 100, "horizon_years": 50},
                       real_world={"target_year": 50})  # long enough for the demo liabilities
    out = tmp_path / "run"
    env = _env(home, url)
    env["PATH"] = "/usr/bin:/bin"  # pqflow is not on PATH, as in a fresh shell after `make demo`
    result = _run([str(BIN / "pqflow"), "run", str(cfg), "--out", str(out)], env, tmp_path)
    assert result.returncode == 0, result.stdout + result.stderr
    assert f"Prefect server at {url}" in result.stdout
    assert "temporary server" not in result.stdout
    new = [r for r in _flow_runs(url) if r["id"] not in before]
    assert [r["state_type"] for r in new] == ["COMPLETED"]  # the run was recorded on that server
    verify_run(out)
    # Standard output is not a terminal: progress comes as plain lines, not a bar.
    assert "progress: 0 of 4 parts generated" in result.stdout
    assert "progress: 4 of 4 parts generated" in result.stdout

    # The closing hint works as printed, in a fresh shell elsewhere with an empty environment.
    [hint] = [line for line in result.stdout.splitlines() if line.startswith("next: ")]
    command = hint.removeprefix("next: ").split("   (e.g.")[0]
    assert command.startswith(str(BIN / "pqflow") + " value ")
    liabilities = REPO / "scenario_configs" / "demo_liabilities.toml"
    fresh = subprocess.run(["env", "-i", "/bin/sh", "-c", command.replace("FILE", str(liabilities))],
                           cwd="/", capture_output=True, text=True, timeout=RUN_TIMEOUT)
    assert fresh.returncode in (0, 1), fresh.stdout + fresh.stderr  # 1: the two sets' values differ
    assert (out / "valuation" / "liability_values.csv").is_file()


def test_a_configured_server_that_does_not_answer_is_refused(small_config, tmp_path):
    # No server fixture: PREFECT_API_URL names a loopback port nobody listens on.
    url = f"http://127.0.0.1:{_free_port()}/api"
    out = tmp_path / "never"
    result = _run([str(BIN / "pqflow"), "run", str(small_config()), "--out", str(out)],
                  _env(tmp_path / "home", url), tmp_path, timeout=120)
    assert result.returncode == 2, result.stdout + result.stderr
    assert f"PREFECT_API_URL is {url}, but no Prefect server answers" in result.stderr
    assert not out.exists()
    from pqflow.errors import PqflowError
    from pqflow.pipeline.deployments import check_server  # what `pqflow deploy` calls first as well

    with pytest.raises(PqflowError, match="no Prefect server answers"):
        check_server(url)


def test_deployment_definition_and_bad_input(small_config, tmp_path, monkeypatch):
    # Built without a server: module-path entrypoint, absolute paths, the quarter-end schedule;
    # a bad configuration, time zone or cron expression is refused before anything is registered.
    from pqflow.errors import PqflowError
    from pqflow.pipeline.deployments import quarterly_deployment, run_folder

    cfg = small_config()
    monkeypatch.chdir(tmp_path)
    d = quarterly_deployment(cfg.name, "quarters", scenarios=300)
    assert d.entrypoint == "pqflow.pipeline.deployments.scheduled_quarterly_run"
    assert d.parameters == {"config_path": str(cfg), "out_root": str(tmp_path / "quarters"), "scenarios": 300,
                            "seed": None, "overwrite": False}
    [s] = d.schedules
    assert (s.schedule.cron, s.schedule.timezone) == ("0 6 1 1,4,7,10 *", "UTC")
    assert d.work_pool_name == "pqflow"
    assert run_folder(cfg, str(tmp_path / "quarters")) == str(tmp_path / "quarters" / "2026-09-30")
    assert run_folder(cfg, "s3://bucket/quarters/") == "s3://bucket/quarters/2026-09-30"
    for kwargs, message in (({"timezone": "Mars/Base"}, "Invalid timezone"), ({"cron": "61 * * * *"}, "Invalid cron")):
        with pytest.raises(PqflowError, match=message):
            quarterly_deployment(cfg, "quarters", **kwargs)
    with pytest.raises(PqflowError, match="missing.toml"):
        quarterly_deployment(tmp_path / "missing.toml", "quarters")

"""The quarterly run as a Prefect deployment: a schedule, parameters and a process work pool.

``pqflow deploy`` (or :func:`deploy_quarterly`) registers the flow :func:`scheduled_quarterly_run`
with a running Prefect server (``PREFECT_API_URL``). A process worker polling the work pool
(``prefect worker start --pool NAME``) then runs it at every quarter end, or when it is
triggered from the UI or ``prefect deployment run``.

The worker loads the flow by module path (``pqflow.pipeline.deployments.scheduled_quarterly_run``), so
the worker's Python must have pqflow installed (``pip install -e .``, which ``make`` does into
``.venv``); it runs each flow in a temporary working directory, so the deployment's paths are
made absolute when it is registered.

Each run writes to ``OUT_ROOT/VALUATION_DATE`` (the configuration's ``run.valuation_date``), so
quarters do not overwrite one another; a scheduled run whose configuration still names an
earlier quarter's date is refused (that folder already holds the earlier run) unless the
deployment's ``overwrite`` parameter is set.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from prefect import flow

from pqflow.config.loader import load_config
from pqflow.errors import PqflowError

__all__ = [
    "QUARTERLY_CRON",
    "DEFAULT_POOL",
    "DEFAULT_DEPLOYMENT",
    "scheduled_quarterly_run",
    "run_folder",
    "quarterly_deployment",
    "deploy_quarterly",
    "ensure_process_pool",
    "api_url",
    "check_server",
]

QUARTERLY_CRON = "0 6 1 1,4,7,10 *"  # 06:00 on the first day after each quarter end
DEFAULT_POOL = "pqflow"
DEFAULT_DEPLOYMENT = "quarterly"


def run_folder(config_path: str | Path, out_root: str) -> str:
    """Where a scheduled run writes: ``out_root/<valuation date>`` (a path or a URI)."""
    date = load_config(config_path).run.valuation_date.isoformat()
    return f"{out_root.rstrip('/')}/{date}" if "://" in out_root else str(Path(out_root) / date)


@flow(name="scheduled-quarterly-run", log_prints=False)
def scheduled_quarterly_run(
    config_path: str,
    out_root: str,
    scenarios: int | None = None,
    seed: int | None = None,
    overwrite: bool = False,
) -> dict[str, Any]:
    """The deployed quarterly run: calibrate, generate both sets, validate, write the manifest
    into ``out_root/<valuation date>``; progress lines go to the worker's log."""
    from pqflow.pipeline.flows import run_quarterly

    out_dir = run_folder(config_path, out_root)
    return run_quarterly(
        config_path, out_dir, scenarios=scenarios, seed=seed, overwrite=overwrite, show_progress=True
    )


def api_url() -> str | None:
    """The Prefect API this process talks to (``PREFECT_API_URL``), or None in local mode."""
    from prefect.settings import get_current_settings

    return get_current_settings().api.url or None


def check_server(url: str, timeout: float = 10.0) -> None:
    """Refuse a ``PREFECT_API_URL`` that does not answer, before any work: Prefect itself would
    fail later with a long traceback. Any HTTP answer (even 401 from a server that wants a key)
    counts as an answer."""
    import urllib.error
    import urllib.request

    try:
        urllib.request.urlopen(url.rstrip("/") + "/health", timeout=timeout).close()
    except urllib.error.HTTPError:
        return
    except (OSError, ValueError) as exc:
        reason = getattr(exc, "reason", exc)
        raise PqflowError(
            f"PREFECT_API_URL is {url}, but no Prefect server answers there ({reason}); start it "
            "('prefect server start'), or unset PREFECT_API_URL to run with a temporary local server"
        ) from None


def _absolute(location: str | Path) -> str:
    text = str(location)
    return text if "://" in text else str(Path(text).expanduser().absolute())


def quarterly_deployment(
    config_path: str | Path,
    out_root: str | Path,
    *,
    scenarios: int | None = None,
    seed: int | None = None,
    overwrite: bool = False,
    name: str = DEFAULT_DEPLOYMENT,
    work_pool: str = DEFAULT_POOL,
    cron: str = QUARTERLY_CRON,
    timezone: str = "UTC",
    paused: bool = False,
):
    """The deployment (a ``RunnerDeployment``, not yet registered): the flow by module path,
    its parameters with absolute paths, a cron schedule in ``timezone``, the work pool.

    The configuration is read now, so a bad file is refused before anything is registered.
    """
    from prefect.deployments.runner import EntrypointType
    from prefect.schedules import Cron

    config = Path(config_path).expanduser().absolute()
    load_config(config)  # every input error now, naming file and key
    from prefect.client.schemas.schedules import CronSchedule

    try:
        schedule = Cron(cron, timezone=timezone)
        CronSchedule(cron=cron, timezone=timezone)  # what the server stores: checks both now
    except Exception as exc:  # noqa: BLE001 (Prefect raises ValueError or pydantic errors)
        detail = exc.errors()[0]["msg"] if hasattr(exc, "errors") else str(exc)
        raise PqflowError(f"bad schedule: cron {cron!r} in time zone {timezone!r}: {detail}") from None
    return scheduled_quarterly_run.to_deployment(
        name=name,
        schedule=schedule,
        paused=paused,
        parameters={
            "config_path": str(config),
            "out_root": _absolute(out_root),
            "scenarios": scenarios,
            "seed": seed,
            "overwrite": overwrite,
        },
        work_pool_name=work_pool,
        description="Quarterly real-world and market-consistent scenario sets, validated, with a manifest.",
        tags=["pqflow"],
        entrypoint_type=EntrypointType.MODULE_PATH,
    )


def ensure_process_pool(name: str) -> bool:
    """Create the process work pool ``name`` if the server has none of that name; True if it
    was created. A pool of another type is refused."""
    from prefect.client.orchestration import get_client
    from prefect.client.schemas.actions import WorkPoolCreate
    from prefect.exceptions import ObjectNotFound

    with get_client(sync_client=True) as client:
        try:
            pool = client.read_work_pool(name)
        except ObjectNotFound:
            client.create_work_pool(WorkPoolCreate(name=name, type="process"))
            return True
    if pool.type != "process":
        raise PqflowError(f"work pool {name!r} exists with type {pool.type!r}; choose another --pool name")
    return False


def deploy_quarterly(config_path: str | Path, out_root: str | Path, **options: Any) -> dict[str, Any]:
    """Register the quarterly deployment with the Prefect server at ``PREFECT_API_URL`` and
    create its process work pool if needed. Returns names, ids and the schedule."""
    url = api_url()
    if not url:
        raise PqflowError(
            "no Prefect server: set PREFECT_API_URL to a running server "
            "(e.g. start one with 'prefect server start' and export "
            "PREFECT_API_URL=http://127.0.0.1:4200/api); a schedule needs a server that stays up"
        )
    deployment = quarterly_deployment(config_path, out_root, **options)
    check_server(url)
    try:
        created = ensure_process_pool(deployment.work_pool_name)
        deployment_id = deployment.apply()
    except PqflowError:
        raise
    except Exception as exc:  # noqa: BLE001 (connection refused, HTTP errors)
        raise PqflowError(f"could not register the deployment with the Prefect server at {url}: {exc}") from None
    return {
        "deployment": f"{deployment.flow_name}/{deployment.name}",
        "deployment_id": str(deployment_id),
        "work_pool": deployment.work_pool_name,
        "work_pool_created": created,
        "parameters": dict(deployment.parameters),
        "schedule": {"cron": deployment.schedules[0].schedule.cron,
                     "timezone": deployment.schedules[0].schedule.timezone},
        "api_url": url,
    }

"""Where batch jobs run: in this process, in local worker processes, or on Dask.

Every executor runs the same :func:`bandmeter.batchjob.analyse_job` and yields
:class:`~bandmeter.batchjob.Outcome` objects as jobs finish (in any order). A job whose
worker dies (killed, out of memory) comes back as a failed outcome; the others go on.
"""

from __future__ import annotations

import multiprocessing
import os
from collections.abc import Iterator, Sequence
from concurrent.futures import ProcessPoolExecutor, as_completed
from concurrent.futures.process import BrokenProcessPool

from .batchjob import Job, Outcome, analyse_job, failed_outcome
from .engine import MALLOC_KEEP_BYTES
from .errors import SettingsError


def _died(job: Job, why: str) -> Outcome:
    return failed_outcome(job, f"worker failed: {why}")


def run_serial(jobs: Sequence[Job]) -> Iterator[Outcome]:
    """One job after the other in this process."""
    for job in jobs:
        yield analyse_job(job)


def run_processes(jobs: Sequence[Job], workers: int) -> Iterator[Outcome]:
    """Jobs on ``workers`` local processes (spawned, so no state leaks from the parent)."""
    context = multiprocessing.get_context("spawn")
    pool = ProcessPoolExecutor(max_workers=workers, mp_context=context)
    try:
        futures = {pool.submit(analyse_job, job): job for job in jobs}
        for future in as_completed(futures):
            try:
                yield future.result()
            except BrokenProcessPool:
                yield _died(futures[future], "a worker process ended abruptly")
            except Exception as exc:  # noqa: BLE001 - isolate one job's failure
                yield _died(futures[future], f"{type(exc).__name__}: {exc}")
    finally:
        pool.shutdown(wait=True, cancel_futures=True)


#: Environment of the worker processes of ``--dask local``. Dask's nanny sets
#: ``MALLOC_TRIM_THRESHOLD_=65536`` for its workers, which makes glibc return the analysis'
#: work arrays to the system after every block and fault them in again (2.5 times the CPU
#: time per recording, measured); these keep freed memory as the engine does in other
#: processes (:func:`bandmeter.engine.keep_freed_memory`, same amount).
DASK_WORKER_ENVIRON = {
    "MALLOC_TRIM_THRESHOLD_": str(MALLOC_KEEP_BYTES),
    "MALLOC_MMAP_THRESHOLD_": str(MALLOC_KEEP_BYTES),
}
_DASK_ENVIRON_KEY = "distributed.nanny.pre-spawn-environ"


def _dask_worker_config() -> dict[str, dict[str, str]]:
    """Dask configuration giving the nanny's workers :data:`DASK_WORKER_ENVIRON` (the whole
    mapping is replaced: Dask would rewrite underscores in a dotted key)."""
    import dask

    current = dict(dask.config.get(_DASK_ENVIRON_KEY, default={}) or {})
    return {_DASK_ENVIRON_KEY: {**current, **DASK_WORKER_ENVIRON}}


def _restore_environ(saved: dict[str, str]) -> None:
    """Put this process's environment back to ``saved`` (a copy of ``os.environ``).

    Dask's nanny writes the workers' environment (``pre-spawn-environ``) into the
    environment of the process that starts them, before every spawn; without this the
    caller of a ``--dask local`` batch would keep those settings, and hand them on to any
    process it starts later.
    """
    for key in [k for k in os.environ if k not in saved]:
        del os.environ[key]
    for key, value in saved.items():
        if os.environ.get(key) != value:
            os.environ[key] = value


def run_dask(jobs: Sequence[Job], address: str, workers: int) -> Iterator[Outcome]:
    """Jobs on Dask distributed: ``address`` "local" starts a LocalCluster of ``workers``
    single-threaded processes; otherwise it is a scheduler address (``tcp://host:8786``).
    The caller's environment is left as it was (see :func:`_restore_environ`)."""
    try:
        from distributed import Client, LocalCluster
        from distributed import as_completed as dask_completed
    except ImportError:  # pragma: no cover - a dependency
        raise SettingsError("--dask needs the 'distributed' package") from None
    cluster = None
    saved = dict(os.environ)
    try:
        if address == "local":
            import dask

            with dask.config.set(_dask_worker_config()):
                cluster = LocalCluster(n_workers=workers, threads_per_worker=1,
                                       processes=True, dashboard_address=None)
            client = Client(cluster)
        else:
            client = Client(address, timeout="20s")
    except (OSError, TimeoutError) as exc:
        if cluster is not None:
            cluster.close()
        raise SettingsError(f"cannot reach the Dask scheduler at {address} ({exc})") from None
    finally:
        _restore_environ(saved)
    try:
        futures = {client.submit(analyse_job, job, pure=False, key=f"bandmeter-{job.id}"): job
                   for job in jobs}
        for future in dask_completed(list(futures)):
            try:
                yield future.result()
            except Exception as exc:  # noqa: BLE001 - isolate one job's failure
                yield _died(futures[future], f"{type(exc).__name__}: {exc}")
    finally:
        client.close()
        if cluster is not None:
            cluster.close()
        _restore_environ(saved)  # a worker restarted by its nanny wrote it again


def run_jobs(jobs: Sequence[Job], workers: int = 1, dask: str | None = None
             ) -> Iterator[Outcome]:
    """Run jobs on the executor the options name (see the module docstring)."""
    if dask is not None:
        return run_dask(jobs, dask, workers)
    if workers <= 1 or len(jobs) <= 1:
        return run_serial(jobs)
    return run_processes(jobs, min(workers, len(jobs)))

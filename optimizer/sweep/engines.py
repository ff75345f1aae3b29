"""Where variant jobs run: a local process pool, or an existing Dask distributed cluster.

Both engines take :func:`.job.run_variant` jobs and hand back
:class:`.job.VariantResult` objects; the coordinator stores everything, so
workers need no shared folder. Worker processes live for the whole sweep and
keep their built solvers between variants. brace opens no network
connection of its own: the Dask engine is Dask's client talking to the
scheduler address the user gives.
"""
from __future__ import annotations

import concurrent.futures as cf
import multiprocessing
import os
import signal

from ..errors import InputError
from .job import run_variant

CLI = "command line"


def _ignore_interrupts() -> None:
    """Pool workers leave Ctrl-C to the coordinator, which stops them itself."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)


class LocalPool:
    """``workers`` processes on this machine (default: one per core)."""

    def __init__(self, workers: int | None = None):
        self.workers = int(workers or os.cpu_count() or 1)
        self._pool = self._start()

    def _start(self):
        context = multiprocessing.get_context("spawn")  # no state copied from the coordinator
        return cf.ProcessPoolExecutor(max_workers=self.workers, mp_context=context, initializer=_ignore_interrupts)

    def describe(self) -> str:
        return f"local pool of {self.workers} worker process{'es' if self.workers != 1 else ''}"

    def submit(self, job):
        return self._pool.submit(run_variant, job)

    def wait(self, futures, timeout: float):
        done, _ = cf.wait(futures, timeout=timeout, return_when=cf.FIRST_COMPLETED)
        return done

    def result(self, future):
        return future.result()

    def recover(self) -> None:
        """Replace a pool whose worker died (the jobs it held are reported as errors)."""
        self.stop()
        self._pool = self._start()

    def stop(self, pending=()) -> None:
        """Cancel queued jobs and end the worker processes now (running solves are abandoned)."""
        processes = list((getattr(self._pool, "_processes", None) or {}).values())
        self._pool.shutdown(wait=False, cancel_futures=True)
        for process in processes:
            if process.is_alive():
                process.terminate()
        for process in processes:
            process.join(timeout=5)

    def close(self) -> None:
        self._pool.shutdown(wait=True)


class DaskCluster:
    """An existing Dask distributed cluster reached through its scheduler ``address`` (``tcp://HOST:PORT``).

    Start workers with one thread each (``--nthreads 1``; add processes with
    ``--nworkers``): a worker process solves one variant at a time.
    """

    def __init__(self, address: str, connect_timeout: float = 10.0):
        try:
            from distributed import Client
        except ImportError:
            raise InputError(CLI, "--scheduler", "the Dask extra installed (pip install -e '.[cluster]')",
                             "distributed is not installed") from None
        if not isinstance(address, str) or "://" not in address:
            raise InputError(CLI, "--scheduler", "a scheduler address like tcp://127.0.0.1:8786", address)
        try:
            self.client = Client(address, timeout=connect_timeout)
        except (OSError, TimeoutError) as exc:
            raise InputError(CLI, "--scheduler", "a running Dask scheduler at that address", address,
                             str(exc).splitlines()[0][:120] if str(exc) else type(exc).__name__) from None
        self.address = address
        self.workers = max(1, sum(w.get("nthreads", 1) for w in self.client.scheduler_info()["workers"].values()))

    def describe(self) -> str:
        return f"Dask cluster at {self.address} ({self.workers} worker thread{'s' if self.workers != 1 else ''})"

    def submit(self, job):
        return self.client.submit(run_variant, job, pure=False)

    def wait(self, futures, timeout: float):
        from distributed import wait
        from distributed.utils import TimeoutError as DaskTimeout

        try:
            done, _ = wait(list(futures), timeout=timeout, return_when="FIRST_COMPLETED")
        except (TimeoutError, DaskTimeout):
            return set()
        return set(done)

    def result(self, future):
        return future.result()

    def recover(self) -> None:
        """Dask reschedules a lost worker's jobs itself."""

    def stop(self, pending=()) -> None:
        """Cancel this sweep's jobs on the cluster and disconnect (the cluster keeps running)."""
        if pending:
            self.client.cancel(list(pending))
        self.client.close()

    def close(self) -> None:
        self.client.close()


def engine_for(workers: int | None, scheduler: str | None):
    """The Dask engine when ``scheduler`` is given, else a local pool."""
    if scheduler:
        if workers:
            raise InputError(CLI, "--workers", "no --workers with --scheduler (the cluster has its own workers)",
                             workers)
        return DaskCluster(scheduler)
    if workers is not None and not 1 <= workers <= 512:
        raise InputError(CLI, "--workers", "a whole number from 1 to 512", workers)
    return LocalPool(workers)

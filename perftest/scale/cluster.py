"""Where the windows of :func:`perftest.scale.many.reconcile_many` are computed with Dask.

The scheduler is chosen here (an explicit one, Dask's configured one, an active
``distributed`` client, or a :func:`local_cluster` started for the job), connected
to by address, and the chunks are handed to it: to a ``distributed.Client`` as
futures, at most two per worker thread in flight, with the plant scattered to every
worker once; to Dask's local schedulers in batches of ``dask.compute`` calls, one
process pool for the whole job.  The per-chunk function itself stays with
:mod:`perftest.scale.many` and is passed in, so that both engines call the same one.
"""

from __future__ import annotations

import copy
import warnings

from perftest.errors import InputError

__all__ = ["local_cluster"]

# Dask's own names for its local schedulers (dask.base.named_schedulers).
_DASK_SCHEDULERS = (
    "processes",
    "multiprocessing",
    "threads",
    "threading",
    "sync",
    "synchronous",
    "single-threaded",
)


def _import_dask():
    try:
        import dask
    except ImportError:
        raise InputError(
            "reconcile_many(engine='dask') needs Dask, which is not installed. Install it "
            'with pip install "perftest[scale]", or use engine="local".',
            parameter="engine",
        ) from None
    return dask


# Dask's sampling of its own health, made less frequent in the processes of a cluster
# that computes perftest's windows (local_cluster sets them; README.md gives them as
# environment variables for `dask worker` and `dask scheduler`).  Every Dask server
# (scheduler, nanny, worker) wakes its event loop every 20 ms to time it (the "tick")
# and every 500 ms to read the process's and the host's counters (the system
# monitor); each wake-up of a worker's event loop also takes the interpreter lock
# from the computing thread.  Measured on a 2-core machine with a loopback scheduler
# and 2 workers with their nannies (benchmarks/bench_cluster.py --dask-defaults):
# idle for 10 s they used 0.29 CPU-seconds with these settings against 0.64-1.03
# with Dask's defaults, and over a year of windows they computed 3.6 %, 4.6 % and
# 7.8 % more windows per second than the same cluster on Dask's defaults in the same
# three runs.  Both only feed diagnostics: a blocked event loop is still reported
# (after distributed.admin.tick.limit, 3 s), and the figures the scheduler and its
# dashboard show are up to 2 s old.  The memory monitor, which spills, pauses and
# restarts a worker near its memory limit, keeps Dask's default.
QUIET_SETTINGS = {
    "distributed.admin.tick.interval": "1s",
    "distributed.admin.system-monitor.interval": "2s",
}
# Dask's statistical worker profiler (see local_cluster)
PROFILER_OFF = {"distributed.worker.profile.enabled": False}


def environment(settings: dict) -> dict:
    """Dask settings as the environment variables Dask reads at start-up
    (``distributed.admin.tick.interval`` -> ``DASK_DISTRIBUTED__ADMIN__TICK__INTERVAL``)."""
    return {
        "DASK_" + "__".join(k.replace("-", "_").upper() for k in key.split(".")): str(value)
        for key, value in settings.items()
    }


# _resolve_scheduler's answer when the job should start its own local_cluster
_OWN_CLUSTER = object()


def _resolve_scheduler(dask, scheduler):
    """The scheduler passed to ``dask.compute``, or ``_OWN_CLUSTER``.

    An explicit choice wins.  Otherwise a scheduler set in Dask's configuration or an
    active ``distributed`` client is used, as Dask itself would; failing both, a
    :func:`local_cluster` started for the job when ``distributed`` is installed,
    else the local processes scheduler, the only one of Dask's local schedulers
    that computes windows in parallel here (windows of one process take turns, see
    ``_WINDOW_LOCK``).
    """
    if scheduler is not None:
        return scheduler
    if dask.config.get("scheduler", None) is not None:
        return None
    try:
        from distributed import default_client
    except ImportError:
        return "processes"
    try:
        return default_client()
    except ValueError:
        return _OWN_CLUSTER


def local_cluster(n_workers: int | None = None, *, profiler: bool = False, **kwargs):
    """A ``distributed.LocalCluster`` set up for :func:`reconcile_many`.

    Worker processes with one thread each (the windows of one process take turns,
    so a second thread would only wait), no dashboard, Dask's sampling of its own
    event loops and system counters made less frequent (every 1 s and 2 s instead of
    20 ms and 500 ms: ``QUIET_SETTINGS``) and, unless ``profiler``, Dask's
    statistical worker profiler switched off.  That profiler samples the
    computing thread's Python stack every 10 ms from the worker's event loop; on
    this job, which is mostly short Python calls, it cost the workers about a fifth
    of their windows per second (benchmarks/bench_year.py, 14 days of one-minute
    logs on 2 workers: 55 windows/s with it, 68 without, same table).

    Parameters
    ----------
    n_workers : int, optional
        Worker processes; default the number of CPUs Dask sees.
    profiler : bool, default False
        Keep Dask's worker profiler (its "Profile" page) running.
    **kwargs
        Passed to ``distributed.LocalCluster`` and override the settings above.

    Returns
    -------
    distributed.LocalCluster
        Close it (``with local_cluster() as cluster:``) when done.  Keep one open
        and pass ``distributed.Client(cluster)`` as ``scheduler`` to run several
        jobs on warm workers.

    Raises
    ------
    InputError
        ``n_workers`` is not a whole number of at least 1, or ``distributed`` is not
        installed.

    Notes
    -----
    Workers started elsewhere (``dask worker``) take the same settings from the
    environment variables ``DASK_DISTRIBUTED__WORKER__PROFILE__ENABLED=False``,
    ``DASK_DISTRIBUTED__ADMIN__TICK__INTERVAL=1s`` and
    ``DASK_DISTRIBUTED__ADMIN__SYSTEM_MONITOR__INTERVAL=2s`` (the last two for
    ``dask scheduler`` too).  A ``config`` keyword replaces all of them for the
    worker processes.
    """
    if n_workers is not None and (
        isinstance(n_workers, bool) or not isinstance(n_workers, int) or n_workers < 1
    ):
        raise InputError(
            f"The 'n_workers' parameter of local_cluster must be a whole number of at least "
            f"1, or None for one worker per CPU. Got {n_workers!r}.",
            parameter="n_workers",
        )
    dask = _import_dask()
    try:
        from distributed import LocalCluster
    except ImportError:
        raise InputError(
            "A local Dask cluster needs the 'distributed' package. Install it with pip "
            'install "perftest[scale]".',
            parameter="engine",
        ) from None
    settings = {**QUIET_SETTINGS, **({} if profiler else PROFILER_OFF)}
    opts = dict(
        n_workers=n_workers or dask.system.CPU_COUNT,
        threads_per_worker=1,
        processes=True,
        dashboard_address=None,
    )
    opts.update(kwargs)
    with dask.config.set(settings):
        if opts["processes"] and "config" not in opts:
            # each worker process gets this configuration from its nanny, also for
            # workers the cluster starts later (scale up)
            opts["config"] = copy.deepcopy(dask.config.config)
        with warnings.catch_warnings():
            # The cluster has no dashboard, but the scheduler's HTTP server still
            # tries port 8787 first and says so when another program holds it;
            # perftest does not use that server, so the note only confuses.
            warnings.filterwarnings("ignore", message=r"Port \d+ is already in use")
            return LocalCluster(**opts)


def _connect(scheduler):
    """A ``distributed.Client`` for a scheduler address, or None."""
    if isinstance(scheduler, str) and "://" in scheduler:
        try:
            from distributed import Client
        except ImportError:
            raise InputError(
                "A scheduler address needs the 'distributed' package. Install it with "
                'pip install "perftest[scale]".',
                parameter="scheduler",
            ) from None
        try:
            return Client(scheduler, timeout="10s")
        except OSError as exc:
            raise InputError(
                f"The 'scheduler' parameter of reconcile_many: no Dask scheduler answers at "
                f"{scheduler} ({exc}). Start one (dask scheduler) or check the address.",
                parameter="scheduler",
            ) from None
    return None


def _run_dask(dask, scheduler, plant, work, options, done, chunk_rows):
    """Compute ``work`` (an iterator of (chunk, payload)) with ``chunk_rows(plant, chunk,
    payload, options)`` and call ``done(chunk, rows)`` per chunk."""
    try:
        from distributed import Client
    except ImportError:
        Client = None
    if Client is not None and isinstance(scheduler, Client):
        from distributed import as_completed

        client = scheduler
        limit = max(2, 2 * sum(client.nthreads().values()))
        # the plant (with its built model) travels to each worker once
        plant_f = client.scatter(plant, broadcast=True, hash=False)
        pending = as_completed()
        meta = {}
        work = iter(work)
        try:
            for chunk, payload in work:
                fut = client.submit(chunk_rows, plant_f, chunk, payload, options, pure=False)
                meta[fut.key] = chunk
                pending.add(fut)
                while pending.count() >= limit:
                    fut = next(pending)
                    done(meta.pop(fut.key), fut.result())
            for fut in pending:
                done(meta.pop(fut.key), fut.result())
        finally:
            for fut in list(pending.futures):
                fut.cancel()
        return

    def lit(value):
        # traverse=False: the plant and the chunks are dataclasses, which Dask
        # would otherwise take apart and rebuild field by field.
        return dask.delayed(value, traverse=False)

    task = dask.delayed(chunk_rows, pure=False)
    plant_d, options_d = lit(plant), lit(options)
    kwargs = {"scheduler": scheduler}
    pool = None
    if scheduler in ("processes", "multiprocessing"):
        # one pool of worker processes for the whole job (Dask would start one per
        # compute call)
        import concurrent.futures

        from dask.multiprocessing import get_context

        pool = concurrent.futures.ProcessPoolExecutor(
            dask.system.CPU_COUNT, mp_context=get_context()
        )
        kwargs["pool"] = pool
    batch_size = max(4, 2 * dask.system.CPU_COUNT)

    def flush(batch):
        tasks = [task(plant_d, lit(c), lit(p), options_d) for c, p in batch]
        for (c, _), rows in zip(batch, dask.compute(*tasks, **kwargs), strict=True):
            done(c, rows)

    try:
        batch = []
        for item in work:
            batch.append(item)
            if len(batch) >= batch_size:
                flush(batch)
                batch = []
        if batch:
            flush(batch)
    finally:
        if pool is not None:
            pool.shutdown()

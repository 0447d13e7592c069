"""Many windows and many runs: fleet-scale reconciliation and monitoring.

:mod:`~perftest.scale.many` (:func:`reconcile_many`, :func:`local_cluster`) computes
windows in chunks with the local or the Dask engine;
:mod:`~perftest.scale.windows` cuts a run into windows and chunks,
:mod:`~perftest.scale.files` reads run files a day at a time,
:mod:`~perftest.scale.store` keeps the Parquet window store with resume, and
:mod:`~perftest.scale.monitor` is the ``perftest monitor`` command.

May import: every stage below it, the report stage included (for the trend figure).
"""

from perftest.scale.many import local_cluster, reconcile_many

__all__ = ["local_cluster", "reconcile_many"]

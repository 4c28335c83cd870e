"""Running the variants on Dask: a local cluster started for the sweep, or an existing one.

Stage: variants (execution). In: the base study, the variants to compute and the base model's
located gauges. Out: one :class:`~correlate.variants.evaluate.VariantResult` per variant, handed
to a callback as each finishes (so the caller can keep it before the next one arrives).

One task per variant (:func:`~correlate.variants.evaluate.correlate_variant`): the worker reads
the variant's files by path and returns its readings and metrics, a few kB; no mesh or field goes
through the scheduler. The located gauges (with the test's data) and the base study are
scattered to every worker once and passed to the tasks by reference; each worker imports what
the tasks use before the first one (:func:`warm_up`). ``dask.distributed`` is imported here, when a sweep runs, never at package
import.
"""

from __future__ import annotations

import logging
import os
from collections.abc import Callable, Sequence
from typing import Any

from correlate.core import progress
from correlate.core.errors import CorrelateError
from correlate.readers.records import Study
from correlate.variants.evaluate import Located, VariantResult, correlate_variant
from correlate.variants.sweep_file import Variant

__all__ = ["compute_variants", "local_cluster", "warm_up"]

CONNECT_TIMEOUT = "10s"   # an unreachable scheduler is reported after this


def warm_up() -> None:
    """Import on a worker what a variant's task uses (readers, meshio, VTK, statsmodels),
    before the first task: the variants' stage then measures the variants, and the first
    variants on each worker do not carry a second or more of imports."""
    import meshio  # noqa: F401  (the mesh record's conversion; 0.05 s to import)
    import statsmodels.regression.linear_model  # noqa: F401
    import vtkmodules.vtkIOXML  # noqa: F401

    import correlate.comparison.correlation
    import correlate.readers.named_arrays
    import correlate.variants.evaluate  # noqa: F401


def local_cluster(workers: int) -> Any:
    """A ``LocalCluster`` of ``workers`` processes of one thread each, as a sweep starts it.

    Dask's nannies start workers with MALLOC_TRIM_THRESHOLD_=65536, which fixes glibc's mmap
    threshold at 128 kB: every array a variant reads is then mapped afresh and page-faulted,
    about 25 % of a one-array variant's task (benchmarks/RESULTS.md). One task at a time per
    worker reuses the same sizes, so glibc's own threshold is kept.

    No dashboard; the scheduler's small HTTP server (health and metrics routes, always started)
    listens on a free port of this machine's loopback, not on 8787 of every interface: with
    another Dask dashboard running, 8787 was taken and the sweep printed Dask's "Port 8787 is
    already in use" and an unclosed-socket warning.
    """
    import dask
    from dask.distributed import LocalCluster

    with dask.config.set({"distributed.nanny.pre-spawn-environ.MALLOC_TRIM_THRESHOLD_": None}):
        return LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                            dashboard_address=None, silence_logs=logging.ERROR,
                            scheduler_kwargs={"dashboard_address": "127.0.0.1:0"})


def compute_variants(
    study: Study,
    variants: Sequence[Variant],
    located: Located,
    done: Callable[[Variant, VariantResult], None],
    *,
    workers: int | None = None,
    scheduler: str | None = None,
) -> None:
    """Correlate every variant on a Dask cluster; call ``done(variant, result)`` as each ends.

    Parameters
    ----------
    study : Study
        The base study.
    variants : sequence of Variant
        The variants to compute (those not in the cache).
    located : Located
        The base model's located gauges, scattered to the workers once.
    done : callable
        Called on the client for each finished variant, in the order they finish.
    workers : int, optional
        Worker processes of the local cluster (one thread each). Default: the machine's cores.
    scheduler : str, optional
        Address of an existing scheduler (``tcp://host:port``); its workers must see the
        variant files at the same paths. Then no local cluster is started.

    Raises
    ------
    CorrelateError
        The scheduler cannot be reached.
    """
    if not variants:
        return
    from dask.distributed import Client, as_completed

    if scheduler is None:
        n = workers or os.cpu_count() or 1
        cluster = local_cluster(min(n, len(variants)))
        client = Client(cluster)
    else:
        cluster = None
        try:
            client = Client(scheduler, timeout=CONNECT_TIMEOUT)
        except (OSError, TimeoutError) as exc:
            raise CorrelateError(f"--scheduler {scheduler}: cannot reach the Dask scheduler "
                                 f"({exc}); start it (dask scheduler) or check the address") \
                from None
    try:
        with progress.step("starting the workers"):
            client.run(warm_up)
            shared = client.scatter(located, broadcast=True)
            base = client.scatter(study, broadcast=True)
        futures = {client.submit(correlate_variant, base, v, shared, pure=False,
                                 key=f"correlate-variant-{i}"): v
                   for i, v in enumerate(variants)}
        # results fetched as they finish by the client's event loop, not one call per future
        finished = as_completed(futures, with_results=True, raise_errors=False)
        for fut, result in progress.bar(finished, desc="correlating the variants",
                                        total=len(futures)):
            variant = futures[fut]
            if fut.status == "error":
                exc = fut.exception()
                result = VariantResult(name=variant.name, failure=(
                    f"internal error on the worker: {type(exc).__name__}: {exc}"))
            done(variant, result)
    finally:
        client.close()
        if cluster is not None:
            cluster.close()

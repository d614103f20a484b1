"""How ``nodecast select`` runs its search: on the table in memory, streamed from a chunked source,
or on a Dask cluster (docs/scale.md)."""

from __future__ import annotations

from functools import partial


def in_memory_search(run_selection, table, job, grid, settings, growth, allowed, clock):
    """(result, bundle) of the search on the table in memory, interruptible, with the units'
    progress (``clock``: the select command's UnitClock)."""
    from nodecast.cli.progress import Progress, run_interruptible

    search = partial(run_selection, allowed_nodes=allowed)
    with Progress("select") as progress:
        return run_interruptible(
            search, table, job, grid, settings, growth,
            callback=clock(progress, len(table.rows), max(grid.nodes), settings.folds,
                           growth is not None),
            progress=progress)


def scaled_search(data, source, cluster, job, grid, settings, scoring=None, allowed_nodes=None):
    """(result, bundle) of a search streamed from ``source`` or on the Dask cluster ``cluster``;
    every pass shown on the command's progress line."""
    from nodecast.cli.parsing import check_units
    from nodecast.cli.progress import Progress, cluster_stage

    with Progress("select") as progress:
        progress.stage(cluster_stage(cluster))
        progress.start()
        if cluster:
            from nodecast.trainer.selection_cluster import select_on_cluster

            return select_on_cluster(data, job, grid, settings, cluster, scoring, allowed_nodes,
                                     progress.passes())
        from nodecast.trainer import selection_stream as stream

        try:
            check_units(job.units, source, job)
            if job.task == "classification":
                return stream.select_classes_streaming(source, job, grid, settings.folds,
                                                       settings.activation, scoring,
                                                       progress.passes())
            return stream.select_streaming(source, job, grid, settings, allowed_nodes,
                                           progress.passes())
        finally:
            source.close()  # the spilled copy goes now

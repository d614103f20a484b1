"""``train`` on a Dask cluster: the checks and the two fits of
:func:`nodecast.trainer.training.train`, each pass run on the partitions (:mod:`.distributed`)."""

from __future__ import annotations

import numpy as np

from nodecast.compiler.errors import NodecastError
from nodecast.trainer import partition_passes as passes
from nodecast.trainer.distributed import ClusterRows, figures_on_cluster, fit_on_cluster
from nodecast.trainer.domain_stats import DomainStats
from nodecast.trainer.row_stats import RowStats
from nodecast.trainer.streamed_fit import StreamedFit
from nodecast.trainer.streaming import StreamedTraining
from nodecast.trainer.training import TrainingJob, heavy_tailed, make_estimator, model_bundle


class ClusterTraining(StreamedTraining):
    """The streamed ``train`` whose passes run on cluster partitions instead of local chunks."""

    def __init__(self, header, rows: ClusterRows, job: TrainingJob) -> None:
        class _Header:
            source = "the table"

            def __init__(self, names):
                self.header = tuple(names)

            def check_columns(self, names):
                missing = [name for name in names if name not in self.header]
                if missing:
                    raise NodecastError(f"missing column(s) {', '.join(map(repr, missing))}")

        super().__init__(_Header(header), job)
        self.rows = rows

    def run(self):
        self._count()
        job, f = self.job, (self.job.validation_fraction, self.job.seed)
        model = self._cluster_fit(self.all, "all")
        metrics = {"training": figures_on_cluster(model, job.task, self.rows, "all", *f)}
        if model.heldout_figures_ is not None:
            metrics["validation"] = model.heldout_figures_
        elif self.all.rows - self.kept.rows >= 1 and self.kept.rows >= 2:
            try:
                check = self._cluster_fit(self.kept, "kept")
            except ValueError:
                check = None
            if check is not None:
                metrics["validation"] = figures_on_cluster(check, job.task, self.rows, "held", *f)
        heavy = heavy_tailed(np.concatenate(self.strided_x), self.features, strided=True)
        return model_bundle(job, model, self.features, metrics, self.all.rows, self.outside, heavy)

    def _cluster_fit(self, stats: RowStats, which: str):
        fit = StreamedFit(make_estimator(self.job, self.low, self.high), self.job.task,
                          len(self.features))
        try:
            fit.start(stats.rows, stats.y_low, stats.y_high, stats.labels)
            model = fit_on_cluster(fit, self.rows, which, self.kept_counts,
                                   self.job.validation_fraction, self.job.seed)
            if which == "all":
                self.strided_x = fit.strided_x
            return model
        except ValueError as exc:
            if which == "kept":
                raise
            raise NodecastError(f"cannot train: {' '.join(str(exc).split())}") from None

    def _count(self) -> None:
        from dask import delayed

        job = self.job
        tasks = [delayed(passes.stats)(p, s, self.features, job.targets, job.domain, self.classify,
                                       job.validation_fraction, job.seed)
                 for p, s in zip(self.rows.parts, self.rows.starts(), strict=True)]
        domain, self.all, self.kept = DomainStats(self.features, job.domain), RowStats(), RowStats()
        first_values, self.kept_counts = None, []
        for part_domain, every, kept, first in self.rows.compute(tasks, "reading"):
            domain.merge(part_domain)
            self.all.merge(every)
            self.kept.merge(kept)
            self.kept_counts.append(kept.rows)
            first_values = first if first_values is None else first_values
        self.n_rows = self.all.rows
        if self.n_rows < 2:
            raise NodecastError(f"need at least 2 data rows to train, got {self.n_rows}")
        self._check_targets(first_values)
        self.low, self.high, self.outside = domain.box()


def train_on_cluster(data, job, address: str, progress=None):
    """``nodecast train --cluster``: the bundle of ``train`` on the file ``data``, computed on Dask."""
    from nodecast.trainer import distributed, frames

    with distributed.connect(address), distributed.worker_failures(), distributed.reader_errors(data):
        header, rows = frames.file_partitions(data, job)
        rows.progress = progress
        return ClusterTraining(header, rows, job).run()

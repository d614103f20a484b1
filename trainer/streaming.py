"""``nodecast train`` on a table read chunk by chunk (:mod:`nodecast.trainer.sources`): the same
checks, the same two fits (all rows; the rows not held out, for the validation figures) and the
same bundle as :func:`nodecast.trainer.training.train` on the table in memory, byte for byte, in
memory that does not grow with the number of rows.

Passes over the source: one for the counts, ranges and checks, then per fit one for the anchors,
one for the neighbours (data-driven) and one for the factor, and one per fit for its figures.
"""

from __future__ import annotations

import numpy as np

from nodecast.compiler.bundle import Bundle
from nodecast.compiler.errors import NodecastError
from nodecast.trainer.hidden import block_bounds
from nodecast.trainer.metrics import MetricSums
from nodecast.trainer.progress import PassProgress
from nodecast.trainer.row_hash import held_out
from nodecast.trainer.row_stats import RowStats, check_finite_from
from nodecast.trainer.streamed_fit import StreamedFit, reblock
from nodecast.trainer.training import TrainingJob, feature_columns, heavy_tailed, make_estimator, model_bundle


class StreamedTraining:
    """One ``train`` run over a :class:`~nodecast.trainer.sources.TableSource`."""

    def __init__(self, source, job: TrainingJob, progress: PassProgress | None = None) -> None:
        self.source, self.job, self.progress = source, job, progress or PassProgress()
        self.features = feature_columns(source.header, job)
        self.classify = job.task == "classification"
        if job.categorical:
            raise NodecastError("--categorical is not available for streamed or cluster training "
                                "yet (the level indicators need the table in memory); read the "
                                "file whole (a CSV file without --chunk-rows or --cluster)")
        if self.classify and len(job.targets) != 1:
            raise NodecastError("classification takes exactly one --target column (the labels)")
        unknown = sorted(set(job.domain) - set(self.features))
        if unknown:
            raise NodecastError(f"--domain names unknown feature(s): {', '.join(map(repr, unknown))}")
        self.numeric = self.features + (() if self.classify else job.targets)
        source.check_columns(list(dict.fromkeys(self.numeric + tuple(job.targets))))

    def chunks(self, what: str, rows: str = "all"):
        """(first, X, Y or labels) of the rows ``rows``: "all", "kept" or "held" (held out), with
        ``first`` counted within those rows."""
        n, local = len(self.features), 0
        self.progress.start(what, getattr(self, "n_rows", None))
        for chunk in self.source.chunks(self.numeric, self.job.targets[0] if self.classify else None):
            X, Y = chunk.numbers[:, :n], chunk.labels if self.classify else chunk.numbers[:, n:]
            if rows != "all":
                held = held_out(chunk.first, X.shape[0], self.job.validation_fraction, self.job.seed)
                keep = held if rows == "held" else ~held
                X, Y = X[keep], Y[keep]
            yield local, X, Y
            local += X.shape[0]
            self.progress.advance(len(chunk.numbers))

    def run(self) -> Bundle:
        self._count()
        model = self._fit(self.all, "all")
        metrics = {"training": self._metrics(model, "all")}
        held = self.all.rows - self.kept.rows
        if model.heldout_figures_ is not None:
            metrics["validation"] = model.heldout_figures_
        elif held >= 1 and self.kept.rows >= 2:
            try:
                check = self._fit(self.kept, "kept")
            except ValueError:
                check = None
            if check is not None:
                metrics["validation"] = self._metrics(check, "held")
        heavy = heavy_tailed(np.concatenate(self.strided_x), self.features, strided=True)
        return model_bundle(self.job, model, self.features, metrics, self.all.rows, self.outside,
                            heavy)

    def _fit(self, stats: RowStats, rows: str):
        fit = StreamedFit(make_estimator(self.job, self.low, self.high), self.job.task,
                          len(self.features))
        fit.start(stats.rows, stats.y_low, stats.y_high, stats.labels)
        for first, X, Y in self.chunks("anchors", rows):
            fit.take_anchor_chunk(first, X, Y)
        if fit.finish_anchors():
            for first, X, Y in self.chunks("neighbours", rows):
                fit.take_neighbour_chunk(first, X, Y)
        fit.fit_chunks(lambda: ((X, Y) for _, X, Y in self.chunks("factor", rows)))
        if rows == "all":
            self.strided_x = fit.strided_x
        return fit.estimator

    def _metrics(self, model, rows: str) -> dict:
        sums = MetricSums(self.job.task)
        n_rows = self.all.rows if rows == "all" else self.all.rows - self.kept.rows
        bounds = block_bounds(n_rows, model.hidden_weights_.shape[0], growing=False)
        for X, Y in reblock(((X, Y) for _, X, Y in self.chunks("figures", rows)), bounds):
            sums.update(model.predict(X), Y)
        return sums.result()

    def _count(self) -> None:
        """The first pass: counts, ranges and every check of an in-memory ``train``."""
        from nodecast.trainer.domain_stats import DomainStats

        self.all, self.kept = RowStats(), RowStats()
        domain = DomainStats(self.features, self.job.domain)
        first_values = None
        for first, X, Y in self.chunks("reading"):
            domain.update(first, X)
            if not self.classify:
                check_finite_from(first, Y, self.job.targets, "target")
            if first_values is None and len(Y):
                first_values = Y[0]
            self.all.update(Y, Y if self.classify else None)
            held = held_out(first, X.shape[0], self.job.validation_fraction, self.job.seed)
            self.kept.update(Y[~held], Y[~held] if self.classify else None)
            self.count_chunk(X, Y)
        self.n_rows = self.all.rows
        if self.n_rows < 2:
            raise NodecastError(f"{self.source.source}: need at least 2 data rows to train, got "
                                f"{self.n_rows}" + (" (the file has a header only)"
                                                    if self.n_rows == 0 else ""))
        self._check_targets(first_values)
        self.low, self.high, self.outside = domain.box()

    def count_chunk(self, X, Y) -> None:
        """What a run measures on the first pass besides train's counts (model selection: its
        folds); nothing here."""

    def _check_targets(self, first_values) -> None:
        if self.classify:
            if len(self.all.labels) < 2:
                raise NodecastError(f"target {self.job.targets[0]!r} holds a single class; "
                                    "need at least two")
            return
        for j, name in enumerate(self.job.targets):
            if self.all.y_high[j] - self.all.y_low[j] == 0:
                raise NodecastError(f"target {name!r} holds the single value {first_values[j]!r} "
                                    "in every row; there is nothing to learn")


def train_streaming(source, job: TrainingJob, progress: PassProgress | None = None) -> Bundle:
    """:func:`nodecast.trainer.training.train` over a chunked source; ValueError from the fit
    becomes a one-line error."""
    run = StreamedTraining(source, job, progress)
    try:
        return run.run()
    except NodecastError:
        raise  # bad input (a refused cell, too few rows): its own words, not a failed fit
    except ValueError as exc:
        raise NodecastError(f"cannot train: {' '.join(str(exc).split())}") from None

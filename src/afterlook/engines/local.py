"""Fitting on training files larger than memory, chunk by chunk.

A Gaussian needs only the count, the mean and the centred scatter matrix
(:class:`~afterlook.core.gaussian.SufficientStats`), which merge exactly
across chunks. Alongside them each pass keeps the per-feature minimum and
maximum and a seeded uniform sample of rows (priority sampling: every row
gets a random key, the rows with the smallest keys are kept), from which
the quantile grid for percentiles and any fitted Box-Cox / Yeo-Johnson
lambda are computed.

Rules of the streamed fit (all refused with one clear line otherwise):
every row of the training file is used, so the file must have no label
column; the robust fit and Ledoit-Wolf shrinkage need all rows in memory.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable, Iterable

import numpy as np

from ..core.errors import AfterlookError
from ..core.gaussian import SufficientStats
from ..core.recipe import Recipe

SAMPLE_ROWS = 100_000


@dataclass
class StreamedTraining:
    """What a streamed pass over the training rows gathered."""

    names: list[str]
    stats: SufficientStats
    minimum: np.ndarray
    maximum: np.ndarray
    sample: np.ndarray  # (<= sample_size, d) feature rows, uniform and seeded
    rows_total: int = 0
    rows_dropped: int = 0
    nan_by_feature: dict = field(default_factory=dict)


class Accumulator:
    """Running statistics of feature rows, fed chunk by chunk (any order of merges)."""

    def __init__(self, names: list[str], sample_size: int = SAMPLE_ROWS, random_state: int = 0):
        d = len(names)
        self.names = list(names)
        self.stats = SufficientStats.empty(d)
        self.minimum = np.full(d, np.inf)
        self.maximum = np.full(d, -np.inf)
        self.sample_size = sample_size
        self.sample = np.empty((0, d))
        self.keys = np.empty(0)
        self.rows_total = 0
        self.rows_dropped = 0
        self.nan_by_feature = dict.fromkeys(names, 0)
        self.rng = np.random.default_rng(random_state)

    def add(self, X: np.ndarray, keys: np.ndarray | None = None) -> None:
        X = np.asarray(X, dtype=np.float64)
        self.rows_total += X.shape[0]
        bad = ~np.isfinite(X)
        for j, name in enumerate(self.names):
            self.nan_by_feature[name] += int(bad[:, j].sum())
        finite = ~bad.any(axis=1)
        self.rows_dropped += int((~finite).sum())
        X = X[finite]
        if keys is None:
            keys = self.rng.random(finite.size)
        keys = keys[finite]
        if X.shape[0] == 0:
            return
        self.stats = self.stats.merge(SufficientStats.of(X))
        np.minimum(self.minimum, X.min(axis=0), out=self.minimum)
        np.maximum(self.maximum, X.max(axis=0), out=self.maximum)
        self._keep(X, keys)

    def absorb(self, other: "Accumulator") -> None:
        """Merge another accumulator (e.g. one partition's) into this one."""
        self.rows_total += other.rows_total
        self.rows_dropped += other.rows_dropped
        for k, v in other.nan_by_feature.items():
            self.nan_by_feature[k] += v
        if other.stats.n == 0:
            return
        self.stats = self.stats.merge(other.stats)
        np.minimum(self.minimum, other.minimum, out=self.minimum)
        np.maximum(self.maximum, other.maximum, out=self.maximum)
        self._keep(other.sample, other.keys)

    def _keep(self, X: np.ndarray, keys: np.ndarray) -> None:
        rows = np.vstack([self.sample, X])
        allkeys = np.concatenate([self.keys, keys])
        if allkeys.size > self.sample_size:
            idx = np.argpartition(allkeys, self.sample_size - 1)[: self.sample_size]
            idx.sort()
            rows, allkeys = rows[idx], allkeys[idx]
        self.sample, self.keys = rows, allkeys

    def result(self) -> StreamedTraining:
        order = np.argsort(self.keys, kind="stable")  # deterministic order, independent of chunking
        return StreamedTraining(self.names, self.stats, self.minimum, self.maximum, self.sample[order],
                                self.rows_total, self.rows_dropped, dict(self.nan_by_feature))


def raw_chunks_to_features(recipe: Recipe, raw_names: list[str]) -> Callable[[np.ndarray], np.ndarray]:
    """A function turning a chunk of raw columns into the recipe's feature rows."""

    def convert(chunk: np.ndarray) -> np.ndarray:
        columns = {name: chunk[:, j] for j, name in enumerate(raw_names)}
        return recipe.apply(columns).values

    return convert


def needs_fitted_lambda(recipe: Recipe) -> bool:
    """Whether a transform of the recipe still needs its lambda, or a derived feature its frozen
    statistics (both fitted from the seeded sample)."""
    return recipe.needs_fit()


def stream(chunks: Iterable[np.ndarray], convert, names, sample_size, random_state,
           progress: Callable[[int, int], None] | None = None) -> StreamedTraining:
    """Accumulate chunks of raw rows (converted to features) into streamed training statistics;
    ``progress(rows_done, chunks_done)`` after each chunk."""
    acc = Accumulator(names, sample_size, random_state)
    for k, chunk in enumerate(chunks, start=1):
        acc.add(convert(chunk))
        if progress is not None:
            progress(acc.rows_total, k)
    return acc.result()


def fit_local(path, recipe: Recipe, *, chunk_rows: int = 262_144, sample_size: int = SAMPLE_ROWS,
              random_state: int = 0, progress=None) -> tuple[Recipe, StreamedTraining]:
    """Two passes at most: one to fit lambdas on a sample (only when needed), one for the statistics."""
    from ..store.table_stream import iter_numeric_chunks

    raw = recipe.required_columns()
    identity = lambda chunk: chunk  # noqa: E731
    if needs_fitted_lambda(recipe):
        first = stream(iter_numeric_chunks(path, raw, chunk_rows), identity, raw, sample_size, random_state,
                       progress)
        recipe = recipe.fit({name: first.sample[:, j] for j, name in enumerate(raw)})
    convert = raw_chunks_to_features(recipe, raw)
    result = stream(iter_numeric_chunks(path, raw, chunk_rows), convert, recipe.features, sample_size, random_state,
                    progress)
    return recipe, result


def check_streamable(label_col: str | None, path) -> None:
    """Refuse a labelled training file for a streamed fit (every row is used)."""
    if label_col is not None:
        raise AfterlookError(
            f"{path} has a label column '{label_col}': a streamed fit uses every row, so keep only normal rows "
            "in the training file (or fit in memory without --engine)"
        )

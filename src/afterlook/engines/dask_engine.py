"""The same sufficient statistics computed on a Dask cluster.

Each partition of the training file becomes an
:class:`~afterlook.engines.local.Accumulator` (count, mean, scatter,
min/max, seeded sample) in a worker; the driver merges them in partition
order, so the result does not depend on which worker finished first. The
random sample keys of partition ``k`` come from ``(random_state, k)``.

Pass ``scheduler="tcp://host:8786"`` for an existing cluster; without it a
local cluster of processes is started for the call and closed afterwards.
"""

from __future__ import annotations

import contextlib
import logging

import numpy as np

from ..core.blas import with_limited_blas
from ..core.errors import AfterlookError
from ..core.recipe import Recipe
from .local import SAMPLE_ROWS, Accumulator, StreamedTraining, needs_fitted_lambda


@with_limited_blas  # runs in a worker process: the caller's limit does not reach it
def _partition_accumulator(frame, recipe_doc: dict, raw: list[str], names: list[str],
                           sample_size: int, seed: tuple[int, int]) -> Accumulator:
    columns = {c: frame[c].to_numpy(dtype=np.float64, na_value=np.nan) for c in raw}
    if recipe_doc is None:  # the lambda pass samples raw columns
        X = np.column_stack([columns[c] for c in raw])
    else:
        X = Recipe.from_dict(recipe_doc).apply(columns).values
    acc = Accumulator(names, sample_size, random_state=seed[0])
    acc.rng = np.random.default_rng(list(seed))
    acc.add(X)
    return acc


def _read(path: str, raw: list[str]):
    import dask.dataframe as dd

    lower = str(path).lower()
    try:
        if lower.endswith((".parquet", ".pq", ".parq")):
            return dd.read_parquet(path, columns=raw)
        return dd.read_csv(path, usecols=raw, dtype={c: "float64" for c in raw}, blocksize="64MB")
    except (ValueError, OSError, KeyError) as exc:
        raise AfterlookError(f"dask cannot read {path}: {' '.join(str(exc).split())[:200]}") from None


def _collect(path: str, recipe: Recipe | None, raw: list[str], names: list[str], client,
             sample_size: int, random_state: int, progress=None) -> StreamedTraining:
    import dask
    from distributed import as_completed

    ddf = _read(path, raw)
    doc = recipe.to_dict() if recipe is not None else None
    parts = ddf.to_delayed()
    tasks = [dask.delayed(_partition_accumulator)(part, doc, raw, names, sample_size, (random_state, k))
             for k, part in enumerate(parts)]
    try:
        futures = client.compute(tasks)
        position = {future.key: k for k, future in enumerate(futures)}
        accumulators: list = [None] * len(futures)
        rows = 0
        for done, (future, acc) in enumerate(as_completed(futures, with_results=True), start=1):
            accumulators[position[future.key]] = acc  # merged below in partition order: deterministic
            rows += acc.rows_total
            if progress is not None:
                progress(rows, done)
    except AfterlookError:
        raise
    except (ValueError, TypeError, OSError) as exc:
        raise AfterlookError(f"dask could not read {path}: {' '.join(str(exc).split())[:200]}") from None
    total = Accumulator(names, sample_size, random_state)
    for acc in accumulators:  # partition order: deterministic
        total.absorb(acc)
    return total.result()


@contextlib.contextmanager
def dask_client(scheduler: str | None = None):
    """A ``distributed.Client`` on ``scheduler``, or on a local cluster started (and closed) for the block."""
    try:
        from distributed import Client, LocalCluster
    except ImportError:
        raise AfterlookError("the dask engine needs dask[distributed]: pip install 'afterlook[dask]'") from None
    cluster = None
    try:
        if scheduler:
            try:
                client = Client(scheduler, timeout="10s")
            except (OSError, TimeoutError) as exc:
                raise AfterlookError(f"cannot reach the dask scheduler at {scheduler}: {exc}") from None
        else:
            # silence_logs: a worker's failure reaches the user as afterlook's one error line, not as
            # the workers' own log records on stderr
            cluster = LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None,
                                   silence_logs=logging.CRITICAL)
            client = Client(cluster)
        try:
            yield client
        finally:
            client.close()
    finally:
        if cluster is not None:
            cluster.close()


def fit_dask(path, recipe: Recipe, *, scheduler: str | None = None, sample_size: int = SAMPLE_ROWS,
             random_state: int = 0, progress=None) -> tuple[Recipe, StreamedTraining]:
    """Fit lambdas (if any) on a sample, then gather the statistics on the cluster."""
    raw = recipe.required_columns()
    with dask_client(scheduler) as client:
        if needs_fitted_lambda(recipe):
            first = _collect(str(path), None, raw, raw, client, sample_size, random_state, progress)
            recipe = recipe.fit({name: first.sample[:, j] for j, name in enumerate(raw)})
        result = _collect(str(path), recipe, raw, recipe.features, client, sample_size, random_state, progress)
    return recipe, result

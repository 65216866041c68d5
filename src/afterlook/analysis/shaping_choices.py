"""The search's shaping choice per column: searched once, then remembered.

A candidate search offers, for each skewed feature, the shaping transform
(log, power, Box-Cox) that makes its normal rows look most Gaussian. The
choice is :func:`afterlook.core.shaping_fast.chosen_transforms` on the
column's values in the search's seeded sample of the normal rows. It
depends only on those values and on afterlook's own code, so it is kept
under a key made of both (:func:`entry_key`), in three places, read in this
order:

1. this process (the workbench searches case after case on the same rows);
2. the model file (``training.shaping``): the fit draws the same seeded
   sample of its own normal rows and records the choice for each feature, so
   the first search after a fit finds it;
3. the cache folder (:mod:`afterlook.store.cache`, kind "shaping").

A choice is used only where its key is the key of the values at hand: other
rows, other sample settings, another release or an edited checkout give
another key, and the column is searched again. Nothing here is ever an
error: a choice that cannot be read or made is searched, or left out.
"""

from __future__ import annotations

import hashlib
import os
from collections.abc import Mapping

import numpy as np

from ..core.errors import AfterlookError

__all__ = ["expressions", "Choices", "recorded_for_fit", "entry_key"]

#: Choices already made in this process, by column name and a digest of its values.
_SHAPING_CACHE: dict[tuple[str, bytes], str | None] = {}
_SHAPING_CACHE_SIZE = 4096
#: The modules whose code decides a shaping choice and its text: part of every key,
#: so a choice made by other code (another release, or a change in a checkout) is never read.
_SHAPING_CODE = ("core/shaping.py", "core/shaping_fast.py", "core/normality.py", "core/numbers.py",
                 "core/order_stats.py", "core/recipe.py", "core/shaped_text.py", "analysis/shaping_choices.py")
_shaping_code_digest: bytes | None = None


def _shaping_code() -> bytes:
    global _shaping_code_digest
    if _shaping_code_digest is None:
        from pathlib import Path

        from .._version import __version__

        root = Path(__file__).resolve().parent.parent
        h = hashlib.sha256(__version__.encode())
        for rel in _SHAPING_CODE:
            try:
                h.update((root / rel).read_bytes())
            except OSError:  # e.g. a zipped install: the release alone keys the entries
                h.update(rel.encode())
        _shaping_code_digest = h.digest()
    return _shaping_code_digest


def entry_key(name: str, digest: bytes) -> str:
    """The key of a choice for column ``name`` whose values have ``digest`` (:func:`_digest`)."""
    from ..store import cache

    return cache.entry_key("shaping", _shaping_code(), name, digest)


def expressions(transforms: Mapping, sample: Mapping[str, np.ndarray], recorded: Mapping | None = None,
                progress=None) -> dict[str, str]:
    """Expression text of a shaping transform per column (the recipe's own, else the search's choice).

    ``transforms``: the recipe's transforms (a column the recipe shapes by an
    expression keeps it). ``recorded``: a model's ``training.shaping``.
    ``progress``: optional callable(done) with done in [0, 1].
    """
    out = _recipe_own(transforms)
    chosen = _choices({name: v for name, v in sample.items() if name not in out}, recorded, folder=True,
                      progress=progress)
    out.update({name: text for name, (_, text) in chosen.items() if text})
    return out


class Choices:
    """:func:`expressions`, made in a second thread (:class:`afterlook.core.beside.Beside`) while the caller
    goes on; :meth:`result` gives the same mapping, :meth:`stop` ends the thread (a no-op once it is done).

    When nothing stored could answer for any of the columns (this process holds no choice under their
    names, the model no record of them, and the cache folder is off or holds no shaping entry), the
    thread searches at once and the caller computes the columns' digests, the keys the choices are
    remembered under, while it waits in :meth:`result` (on a free core that takes them off the time
    to the first choice); otherwise the thread looks every column up first, as :func:`expressions` does.
    Either way the same choices end up in the same places.
    """

    def __init__(self, transforms: Mapping, sample: Mapping[str, np.ndarray], recorded: Mapping | None = None):
        from ..core.beside import Beside

        self._out = _recipe_own(transforms)
        self._columns = {name: v for name, v in sample.items() if name not in self._out}
        self._search_first = not _could_answer(self._columns, recorded)
        if self._search_first:
            self._beside = Beside(_search, self._columns, name="afterlook-shaping")
        else:
            self._beside = Beside(expressions, transforms, sample, recorded, name="afterlook-shaping")

    def result(self, check=None) -> dict[str, str]:
        """What :func:`expressions` gives; ``check``: as :meth:`Beside.result` (called while waiting)."""
        if not self._search_first:
            return self._beside.result(check=check)
        digests = {name: _digest(values) for name, values in self._columns.items()}  # while the search runs
        chosen = self._beside.result(check=check)
        for name, d in digests.items():
            _keep(name, d, entry_key(name, d), chosen[name], folder=True)
        out = dict(self._out)
        out.update({name: chosen[name] for name in self._columns if chosen[name]})
        return out

    def stop(self) -> None:
        self._beside.stop()


def _could_answer(columns: Mapping, recorded: Mapping | None) -> bool:
    """Whether this process, ``recorded`` or the cache folder could hold a choice for any of ``columns``."""
    from ..store import cache

    if any(name in columns for name, _ in list(_SHAPING_CACHE)):  # a copy: another thread may be adding
        return True
    if isinstance(recorded, Mapping) and any(name in recorded for name in columns):
        return True
    base = cache.folder()
    if base is None:
        return False
    try:
        with os.scandir(base / "shaping") as entries:
            return any(e.name.endswith(".json") for e in entries)
    except OSError:  # no such folder yet (or unreadable: then nothing can be read from it either)
        return False


def recorded_for_fit(transforms: Mapping, raw: Mapping[str, np.ndarray], names: list[str]) -> dict:
    """What a fit records in its model file (``training.shaping``): ``{feature: {"key": ..., "expression":
    text or None}}``.

    ``raw``: the fit's normal rows, features before the recipe's transforms
    (what a search's session reads). The sample is the search's own, with the
    default sample settings (:class:`afterlook.core.candidates.Settings`), so a
    search of these rows with those settings finds every choice recorded here.
    Features the recipe shapes by an expression are left out (the search keeps
    the recipe's own). Choices are remembered in the process too, but not
    written to the cache folder: the model file is their place.
    """
    from ..core.candidates import Settings
    from ..core.search_inputs import finite_sample

    todo = [n for n in names if not (n in transforms and transforms[n].kind == "expression")]
    if not todo or any(np.ndim(raw[n]) == 0 for n in names):  # a constant feature: the search reads no sample
        return {}
    settings = Settings()
    A = finite_sample(raw, names, settings.sample_size, settings.random_state)
    if A.shape[0] == 0:
        return {}
    chosen = _choices({n: A[:, names.index(n)] for n in todo}, folder=False)
    return {n: {"key": key, "expression": text} for n, (key, text) in chosen.items()}


def _choices(columns: Mapping[str, np.ndarray], recorded: Mapping | None = None, *, folder: bool,
             progress=None) -> dict[str, tuple[str, str | None]]:
    """``{name: (key, expression text or None)}`` for every column: from this process's memory, else
    ``recorded`` (a model's ``training.shaping``), else (``folder``) the cache folder, else searched
    (and then written to the folder when ``folder``)."""
    from ..store import cache

    _tell(progress, 0.0)
    digests = {name: _digest(values) for name, values in columns.items()}
    keys = {name: entry_key(name, d) for name, d in digests.items()}
    texts: dict[str, str | None] = {}
    for name, d in digests.items():
        if (name, d) in _SHAPING_CACHE:
            texts[name] = _SHAPING_CACHE[(name, d)]
            continue
        found, text = _recorded_choice(recorded, name, keys[name])
        if not found and folder:
            found, text = _valid(cache.read("shaping", keys[name]))
        if found:
            texts[name] = text
            _remember((name, d), text)
    todo = [name for name in columns if name not in texts]
    if todo:
        _tell(progress, 0.4)
        chosen = _search({name: columns[name] for name in todo},
                         progress=None if progress is None else lambda done: progress(0.4 + 0.6 * done))
        for name in todo:
            texts[name] = chosen[name]
            _keep(name, digests[name], keys[name], chosen[name], folder=folder)
    _tell(progress, 1.0)
    return {name: (keys[name], texts[name]) for name in columns}


def _search(columns: dict[str, np.ndarray], progress=None) -> dict[str, str | None]:
    """The search's choice for each column, as expression text (None: leave it as it is)."""
    from ..core import shaping_fast

    if not columns:
        return {}
    try:
        chosen = shaping_fast.chosen_transforms(columns, progress=progress)
    except (AfterlookError, TypeError):
        chosen = dict.fromkeys(columns)
    out = {}
    for name in columns:
        try:
            out[name] = _as_expression(chosen[name], name)
        except (AfterlookError, TypeError):
            out[name] = None
    return out


def _recorded_choice(recorded, name: str, key: str) -> tuple[bool, str | None]:
    entry = recorded.get(name) if isinstance(recorded, Mapping) else None
    if isinstance(entry, Mapping) and entry.get("key") == key:
        return _valid(entry)
    return False, None


def _valid(entry) -> tuple[bool, str | None]:
    """(found, expression) of a stored choice: an expression that is text, or None for "leave it"."""
    if isinstance(entry, Mapping) and "expression" in entry and (entry["expression"] is None
                                                                  or isinstance(entry["expression"], str)):
        return True, entry["expression"]
    return False, None


def _tell(progress, done: float) -> None:
    if progress is not None:
        progress(done)


def _recipe_own(transforms: Mapping) -> dict[str, str]:
    """The columns the recipe itself shapes by an expression, with that expression (the search keeps them)."""
    return {name: t.expression for name, t in transforms.items() if t.kind == "expression"}


def _keep(name: str, digest: bytes, key: str, text: str | None, *, folder: bool) -> None:
    """A searched choice remembered in this process and (``folder``) written to the cache folder."""
    _remember((name, digest), text)
    if folder:
        from ..store import cache

        cache.write("shaping", key, {"column": name, "expression": text})


def _remember(key: tuple[str, bytes], text: str | None) -> None:
    if len(_SHAPING_CACHE) >= _SHAPING_CACHE_SIZE:
        _SHAPING_CACHE.pop(next(iter(_SHAPING_CACHE)))
    _SHAPING_CACHE[key] = text


def _digest(values) -> bytes:
    a = np.ascontiguousarray(values, dtype=np.float64)
    return hashlib.sha256(memoryview(a).cast("B")).digest()  # no copy of the bytes; sha256 is the fastest here


def _as_expression(transform, name: str) -> str | None:
    from ..core.shaped_text import shaped_text

    if transform is None:
        return None
    if transform.kind == "expression" or (transform.kind == "boxcox" and transform.lmbda is not None):
        return shaped_text(name, transform)  # boxcox(x, p) for a power; the search offers no Yeo-Johnson
    return None

"""Work in a second thread (:class:`afterlook.core.beside.Beside`): its value, its errors, and stopping it.

The work here is plain Python driven by events, so every check waits for a condition, never for a time.
The searches read the Wisconsin diagnostic breast-cancer table bundled with scikit-learn.
"""

from __future__ import annotations

import threading

import pytest

from afterlook.core.beside import Beside


def test_the_value_and_the_errors_of_the_work_reach_the_caller():
    assert Beside(lambda a, b, progress: a + b, 2, 3).result() == 5

    def fails(progress):
        raise ValueError("from the work")

    with pytest.raises(ValueError, match="from the work"):
        Beside(fails).result()


def _steps(reached: threading.Event, release: threading.Event, done: list):
    """Work that reports, waits to be released, then reports once per step for as long as it is let run."""

    def work(progress):
        progress(0.0)
        reached.set()
        release.wait(timeout=60)
        for k in range(1, 1000):
            progress(k / 1000)
            done.append(k)
        return "ran to the end"

    return work


def test_stop_ends_the_work_at_its_next_report_and_waits_for_it():
    reached, release, done = threading.Event(), threading.Event(), []
    job = Beside(_steps(reached, release, done))
    assert reached.wait(timeout=60)
    # released once stop() has asked it to stop, while stop() waits for it: it must not run on
    threading.Thread(target=lambda: job._stop.wait(timeout=60) and release.set()).start()
    job.stop()
    assert done == []  # stopped at the first report after the release
    assert not job._thread.is_alive()


def test_a_check_that_raises_while_waiting_stops_the_work_and_is_raised():
    reached, release, done = threading.Event(), threading.Event(), []
    job = Beside(_steps(reached, release, done))
    assert reached.wait(timeout=60)

    class Gone(Exception):
        pass

    def check():
        # the work is released once the raise below has made result() ask it to stop
        threading.Thread(target=lambda: job._stop.wait(timeout=60) and release.set()).start()
        raise Gone()

    with pytest.raises(Gone):
        job.result(check=check, every=0.001)
    assert done == [] and not job._thread.is_alive()


def _breast_cancer_search():
    """Training rows, labelled cases and a full model for a search: the first six columns of the Wisconsin
    diagnostic breast-cancer table bundled with scikit-learn, its first 60 rows as cases (malignant =
    anomaly; case "44" is one the model misses)."""
    import pandas as pd
    from sklearn.datasets import load_breast_cancer

    import afterlook

    data = load_breast_cancer()
    names = [f"c{k:02d}" for k in range(6)]
    train = pd.DataFrame(data.data[:, :6], columns=names)
    cases = train.iloc[:60].copy()
    cases["label"] = data.target[:60] == 0
    return train, cases, afterlook.fit(train, kind="full")


def test_a_search_that_fails_during_its_screen_leaves_no_shaping_thread_running(monkeypatch):
    # afterlook.suggest makes its shaping choices in a second thread during the screen; an error in the
    # screen (here: raised by the progress callback, as a stale workbench search is stopped) must stop
    # that thread before the call returns.
    import afterlook
    from afterlook.analysis import shaping_choices

    train, cases, model = _breast_cancer_search()
    monkeypatch.setattr(shaping_choices, "_SHAPING_CACHE", {})
    shaping_started, asked_to_stop = threading.Event(), threading.Event()
    real = shaping_choices._search
    real_stop = Beside.stop

    def stop(self):
        self._stop.set()
        asked_to_stop.set()
        real_stop(self)

    def slow_search(columns, progress=None):
        shaping_started.set()
        asked_to_stop.wait(timeout=60)  # held until the search asks it to stop (it never would: a failure)
        progress(0.5)  # the search's own report: where a stopped search ends
        return real(columns, progress=progress)

    monkeypatch.setattr(Beside, "stop", stop)
    monkeypatch.setattr(shaping_choices, "_search", slow_search)

    class Stop(Exception):
        pass

    def progress(stage, fraction):
        if stage.startswith("screening") and fraction > 0.1 and shaping_started.wait(timeout=60):
            raise Stop()

    with pytest.raises(Stop):
        afterlook.suggest(model, cases, train=train, case_ids=["44"], progress=progress)
    assert not [t for t in threading.enumerate() if t.name == "afterlook-shaping"]
    assert shaping_choices._SHAPING_CACHE == {}  # stopped before it made (and remembered) any choice


def test_a_search_reports_progress_that_never_goes_back_while_it_waits_for_its_shaping(monkeypatch):
    # The workbench draws these reports as one bar: the screen, the re-fit preparation and the wait for the
    # shaping thread (here held until the wait has been reported) must not move it backwards.
    import afterlook
    from afterlook.analysis import shaping_choices

    train, cases, model = _breast_cancer_search()
    monkeypatch.setattr(shaping_choices, "_SHAPING_CACHE", {})
    waited = threading.Event()
    real = shaping_choices._search

    def held_search(columns, progress=None):
        waited.wait(timeout=60)
        return real(columns, progress=progress)

    monkeypatch.setattr(shaping_choices, "_search", held_search)
    seen = []

    def progress(stage, fraction):
        seen.append((stage, fraction))
        if stage == "shaping columns":
            waited.set()

    afterlook.suggest(model, cases, train=train, case_ids=["44"], progress=progress)
    fractions = [f for _, f in seen]
    assert "shaping columns" in [s for s, _ in seen]
    assert all(a <= b for a, b in zip(fractions, fractions[1:])), seen
    assert seen[-1] == ("done", 1.0)

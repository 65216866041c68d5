"""The operations users call, one module each, around a session loaded once.

::

    session.py    model + cases (+ the normal population) prepared once: columns read,
                  derived features computed, cases scored
    model.py      Model = recipe + density + threshold + training summary; load_model
    fitting.py    fit, fit_streamed, refit
    evidence.py   misses, explain
    discovery.py  suggest (three passes; the added-column re-fit)
    trial.py      try_features and its before/after comparison
    shape.py      shape
    review.py     review entries, add to a casebook, check a casebook against a model
    report.py     Markdown / self-contained HTML report of a casebook
    wording.py    every word and scale the CLI, the workbench and the report share
    workbench.py  what the workbench shows (its session, case list, evidence, histograms)

The CLI, the Python API (:mod:`afterlook`) and the workbench all call these.
Nothing here imports Textual or Rich.
"""

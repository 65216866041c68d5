"""afterlook: why did real failures score as normal under a Gaussian anomaly detector?

The Python API mirrors the CLI; every result has ``to_dict()`` equal to the
CLI's ``--json`` document::

    import afterlook
    model = afterlook.load_model("model.json")
    cases = afterlook.load_table("cases.csv")
    afterlook.misses(model, cases).to_dict()
    afterlook.explain(model, cases, "PS-01/2026-05-21T17:00")
    afterlook.suggest(model, cases, train=afterlook.load_table("train.csv"))
    afterlook.try_features(model, cases, derive={"r": "a / b"})
    afterlook.shape(df)
    afterlook.from_estimator(MinCovDet().fit(X), columns=[...])  # your own detector

Names are imported lazily so that ``import afterlook.core`` stays light
(numpy and scipy only).
"""

from ._version import __version__

_EXPORTS = {
    "load_table": "afterlook.store.tables",
    "load_model": "afterlook.analysis.model",
    "Model": "afterlook.analysis.model",
    "fit": "afterlook.analysis.fitting",
    "misses": "afterlook.analysis.evidence",
    "explain": "afterlook.analysis.evidence",
    "shape": "afterlook.analysis.shape",
    "suggest": "afterlook.analysis.discovery",
    "try_features": "afterlook.analysis.trial",
    "AfterlookError": "afterlook.core.errors",
    # bring your own detector (scikit-learn is imported inside these functions only)
    "from_estimator": "afterlook.analysis.interop",
    "from_parameters": "afterlook.analysis.interop",
    # casebook: reviewed misses, regression check against a model
    "Casebook": "afterlook.store.casebook_file",
    "review_entry": "afterlook.analysis.review",
    "add_to_casebook": "afterlook.analysis.review",
    "check_casebook": "afterlook.analysis.review",
}

__all__ = ["__version__", *_EXPORTS]


def __getattr__(name: str):
    module = _EXPORTS.get(name)
    if module is None:
        raise AttributeError(f"module 'afterlook' has no attribute {name!r}")
    import importlib

    value = getattr(importlib.import_module(module), name)
    globals()[name] = value
    return value


def __dir__():
    return sorted(__all__)

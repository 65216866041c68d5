"""Model fingerprints: the same fit anywhere gets the same one, a different fit does not.

Outside references: scikit-learn's bundled Wisconsin diagnostic breast cancer
table (569 rows x 30 features; ``sklearn.datasets.load_breast_cancer``) for
real full-covariance fits; afterlook's own BLAS thread setting (AFTERLOOK_BLAS_THREADS, applied through threadpoolctl);
Python's own float formatting (``format(x, ".7e")``, IEEE 754 round-half-even
on the decimal string) as the reference for rounding to 8 significant digits.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from hypothesis import given
from hypothesis import strategies as st
from sklearn.datasets import load_breast_cancer

import afterlook as api
from afterlook.core import fingerprint as fp


@pytest.fixture(scope="module")
def cancer() -> pd.DataFrame:
    data = load_breast_cancer(as_frame=True)
    frame = data.data.copy()
    frame.columns = [c.replace(" ", "_") for c in frame.columns]
    return frame[data.target == 1].reset_index(drop=True)  # benign rows as "normal"


def _perturbed(doc, rng, rel):
    """Every float of a JSON-like document moved by up to ``rel`` relative (another machine's last bits)."""
    if isinstance(doc, dict):
        return {k: _perturbed(v, rng, rel) for k, v in doc.items()}
    if isinstance(doc, list):
        return [_perturbed(v, rng, rel) for v in doc]
    if isinstance(doc, float) and math.isfinite(doc):
        return doc * (1 + rel * rng.uniform(-1, 1))
    return doc


@given(st.floats(min_value=1e-300, max_value=1e300) | st.floats(min_value=-1e300, max_value=-1e-300))
def test_a_scalar_rounds_as_python_formats_it_to_8_significant_digits(x):
    mine = fp.canonical(x)
    mantissa, exponent = mine.split("e")
    reference = float(format(x, ".7e"))  # Python's correctly rounded decimal formatting
    assert math.isclose(int(mantissa) * 10.0 ** int(exponent), reference, rel_tol=1e-12)
    assert len(mantissa.lstrip("-")) in (fp.SIGNIFICANT_DIGITS, fp.SIGNIFICANT_DIGITS + 1)  # 9.99999995 -> 10000000e-7


def test_a_list_rounds_on_the_scale_of_its_largest_entry():
    # an entry that is zero in exact arithmetic, computed with noise of either sign, rounds to zero
    assert fp.canonical([2.5, 3e-18, -1.0]) == fp.canonical([2.5, -2e-18, -1.0])
    assert fp.canonical([2.5, 3e-18])[1] == "0"
    # a real difference at the 8th digit of the largest entry is kept
    assert fp.canonical([2.5, 1.0]) != fp.canonical([2.5 * (1 + 1e-6), 1.0])


def test_last_bit_differences_keep_the_fingerprint(cancer):
    model = api.fit(cancer, kind="full", quantiles=False)
    recipe, density = model.recipe.to_dict(), model.density.to_dict()
    reference = fp.fingerprint(recipe, density, model.threshold)
    assert reference == model.fingerprint()
    rng = np.random.default_rng(20261202)
    for _ in range(20):  # ~1e-14 relative: far more than two installs were seen to differ (1e-16)
        noisy_density = _perturbed(density, rng, 1e-14)
        assert noisy_density != density
        assert fp.fingerprint(recipe, noisy_density, model.threshold * (1 + 1e-15)) == reference
        # the exact scheme, for contrast, changes with the last bits
        assert fp.exact_fingerprint(recipe, noisy_density, model.threshold) != \
            fp.exact_fingerprint(recipe, density, model.threshold)


@pytest.mark.parametrize("data", ["cancer", "demo"])
def test_one_and_two_blas_threads_give_the_same_fingerprint(data, cancer, demo_written, monkeypatch):
    """afterlook sets the BLAS thread count itself (AFTERLOOK_BLAS_THREADS), so vary it through that setting."""
    train = cancer if data == "cancer" else demo_written.train
    fingerprints = set()
    for threads in ("1", "2"):
        monkeypatch.setenv("AFTERLOOK_BLAS_THREADS", threads)
        fingerprints.add(api.fit(train, kind="full", quantiles=False).fingerprint())
    assert len(fingerprints) == 1


def test_a_refit_on_other_rows_or_with_another_recipe_gets_another_fingerprint(cancer):
    base = api.fit(cancer, kind="full", quantiles=False).fingerprint()
    assert api.fit(cancer.iloc[1:], kind="full", quantiles=False).fingerprint() != base
    assert api.fit(cancer, kind="independent", quantiles=False).fingerprint() != base
    derived = api.fit(cancer, kind="full", quantiles=False,
                      derive={"area_per_perimeter": "mean_area / mean_perimeter"}).fingerprint()
    assert derived != base
    other_threshold = api.fit(cancer, kind="full", quantiles=False, threshold="rate:0.05").fingerprint()
    assert other_threshold != base


def test_an_entry_recorded_with_the_old_exact_fingerprint_still_names_the_model(cancer):
    model = api.fit(cancer, kind="full", quantiles=False)
    old = fp.exact_fingerprint(model.recipe.to_dict(), model.density.to_dict(), model.threshold)
    assert old != model.fingerprint()
    assert model.has_fingerprint(old) and model.has_fingerprint(model.fingerprint())
    assert not model.has_fingerprint(api.fit(cancer.iloc[1:], kind="full", quantiles=False).fingerprint())
    assert not model.has_fingerprint(None) and not model.has_fingerprint("")

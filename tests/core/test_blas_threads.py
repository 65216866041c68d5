"""afterlook's work runs with one BLAS thread unless told otherwise, and gives the caller's setting back.

Outside reference: threadpoolctl's own report of the loaded BLAS libraries'
thread counts (``threadpool_info``).
"""

from __future__ import annotations

import numpy as np
import pytest
from threadpoolctl import threadpool_info, threadpool_limits

from afterlook.core.blas import ENV, limited_blas, with_limited_blas
from afterlook.core.errors import AfterlookError


def _blas_threads() -> set[int]:
    return {lib["num_threads"] for lib in threadpool_info() if lib["user_api"] == "blas"}


@pytest.fixture(autouse=True)
def two_threads(monkeypatch):
    monkeypatch.delenv(ENV, raising=False)
    np.ones((4, 4)) @ np.ones((4, 4))  # make sure the BLAS is loaded
    if not _blas_threads():
        pytest.skip("numpy's BLAS is not visible to threadpoolctl here")
    with threadpool_limits(limits=2, user_api="blas"):
        yield


def test_one_thread_inside_and_the_callers_setting_after():
    assert _blas_threads() == {2}
    with limited_blas():
        assert _blas_threads() == {1}
    assert _blas_threads() == {2}


def test_the_environment_chooses_another_number_or_leaves_it_alone(monkeypatch):
    monkeypatch.setenv(ENV, "2")

    @with_limited_blas
    def inside():
        return _blas_threads()

    assert inside() == {2}
    monkeypatch.setenv(ENV, "auto")
    assert inside() == {2}
    monkeypatch.setenv(ENV, "many")
    with pytest.raises(AfterlookError, match=ENV):
        inside()

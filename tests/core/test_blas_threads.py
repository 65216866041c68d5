"""afterlook's work runs with one BLAS thread unless told otherwise, and gives the caller's setting back.

Outside reference: threadpoolctl's own report of the loaded BLAS libraries'
thread counts (``threadpool_info``).
"""

from __future__ import annotations

import numpy as np
import pytest
from threadpoolctl import threadpool_info, threadpool_limits

from afterlook.core.blas import ENV, THREAD_VARIABLES, limited_blas, with_limited_blas
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


def test_nested_and_overlapping_blocks_keep_the_limit_until_the_last_one_ends():
    # The workbench runs searches in threads; BLAS thread counts are process-wide,
    # so a block ending in one thread must not lift the limit another still needs,
    # and the last block, whichever thread it ends in, puts the caller's setting back.
    import threading

    from afterlook.core import blas

    entered, may_leave = threading.Event(), threading.Event()

    def other_thread():
        with limited_blas():
            entered.set()
            may_leave.wait(timeout=60)

    seen = {}
    t = threading.Thread(target=other_thread)
    with limited_blas():
        with limited_blas():
            seen["nested"] = _blas_threads()
        seen["after the nested block"] = _blas_threads()
        t.start()
        entered.wait(timeout=60)
    seen["the first block ended, the other thread is inside"] = _blas_threads()
    may_leave.set()
    t.join(timeout=60)
    assert seen == {"nested": {1}, "after the nested block": {1},
                    "the first block ended, the other thread is inside": {1}}
    assert blas._depth == 0 and not blas._limiters
    assert _blas_threads() == {2}  # put back by the other thread, whose block ended last


def test_a_block_in_another_thread_limits_after_one_in_this_thread():
    # threadpoolctl 3.8 lets only one thread at a time change OpenBLAS's shared count and drops a change
    # made from any other; afterlook hands that control back after each of its changes, so a search in
    # a worker thread (the workbench) runs on one thread even after the main thread ran one.
    import threading

    with limited_blas():
        pass
    seen = {}

    def in_a_thread():
        with limited_blas():
            seen["inside, read in that thread"] = _blas_threads()
        seen["after, read in that thread"] = _blas_threads()

    t = threading.Thread(target=in_a_thread)
    t.start()
    t.join(timeout=60)
    assert seen == {"inside, read in that thread": {1}, "after, read in that thread": {2}}
    with limited_blas():  # and the main thread can still change it afterwards
        assert _blas_threads() == {1}
    assert _blas_threads() == {2}


def test_the_public_operations_run_on_one_thread(monkeypatch, demo_written):
    # Whatever the caller set (two threads here), the numerics inside fit,
    # score, misses, explain, suggest, try and shape see one BLAS thread.
    import afterlook
    from afterlook.core import gaussian

    seen = []
    original = gaussian.GaussianModel.log_density

    def spy(self, *args, **kwargs):
        seen.append(_blas_threads())
        return original(self, *args, **kwargs)

    monkeypatch.setattr(gaussian.GaussianModel, "log_density", spy)
    model = afterlook.load_model(demo_written.model)
    cases = afterlook.load_table(demo_written.cases)
    train = afterlook.load_table(demo_written.train)
    calls = {
        "fit": lambda: afterlook.fit(train, cases=cases),
        "score": lambda: model.score(cases.frame),
        "misses": lambda: afterlook.misses(model, cases),
        "explain": lambda: afterlook.explain(model, cases, afterlook.misses(model, cases).misses[0].case),
        "try": lambda: afterlook.try_features(model, cases, derive={"r": "flow_m3h / motor_current_a"}, train=train),
    }
    for name, call in calls.items():
        seen.clear()
        call()
        assert seen and all(s == {1} for s in seen), name
    assert _blas_threads() == {2}


def test_a_new_process_starts_with_the_configured_threads():
    from afterlook.core.blas import environment_for_new_process

    env = environment_for_new_process({"PATH": "/bin"})
    assert env["OPENBLAS_NUM_THREADS"] == "1" and env["OMP_NUM_THREADS"] == "1"
    # the user's own settings win, and 'auto' leaves the library's default
    assert environment_for_new_process({"OPENBLAS_NUM_THREADS": "2"})["OPENBLAS_NUM_THREADS"] == "2"
    assert environment_for_new_process({ENV: "3"})["OPENBLAS_NUM_THREADS"] == "3"
    assert "OPENBLAS_NUM_THREADS" not in environment_for_new_process({ENV: "auto"})


_NEW_PROCESS = """
import os, sys
from afterlook.core import blas
os.environ.update(blas.environment_for_new_process())
noted = blas.note_environment()
import numpy as np
with blas.limited_blas():
    np.ones((64, 64)) @ np.ones((64, 64))
    looked = "threadpoolctl" in sys.modules  # limited_blas imports it only to look at the libraries
    from threadpoolctl import threadpool_info
    threads = sorted({lib["num_threads"] for lib in threadpool_info() if lib["user_api"] == "blas"})
print(int(noted), int(looked), threads[0] if threads else 0)
"""


@pytest.mark.parametrize("user_setting, expected", [(None, (1, 0, 1)), ("2", (0, 1, 1))])
def test_a_command_process_started_with_the_limit_needs_no_look_at_its_libraries(user_setting, expected):
    # the console script sets the variables before numpy loads (entry()); a user's own setting means a look
    import os
    import subprocess
    import sys

    env = {k: v for k, v in os.environ.items() if k not in (*THREAD_VARIABLES, ENV)}
    if user_setting:
        env["OPENBLAS_NUM_THREADS"] = user_setting
    out = subprocess.run([sys.executable, "-c", _NEW_PROCESS], capture_output=True, text=True, env=env, check=True,
                         timeout=120).stdout.split()
    noted, looked, threads = map(int, out)
    if threads == 0:
        pytest.skip("numpy's BLAS is not visible to threadpoolctl here")
    assert (noted, looked, threads) == expected

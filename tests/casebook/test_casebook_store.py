"""The casebook file layer: format, upsert history, atomic save with backup, conflicts, refusing bad files.

Outside references: the ``json`` module parses what was written; ``hashlib``
checks that refused files are byte-identical.
"""

from __future__ import annotations

import hashlib
import json
import os

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from afterlook.core.errors import AfterlookError
from afterlook.store.casebook_file import (
    HISTORY_LIMIT,
    STATUSES,
    Casebook,
    CasebookConflict,
    backup_path,
)


def entry(case="PS-01/1", status="open", note="", **extra):
    return {"case": case, "status": status, "note": note, "reviewer": "r", "updated": "2026-01-01T00:00:00Z",
            "created": "2026-01-01T00:00:00Z", **extra}


def sha(path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()  # hashlib: independent of afterlook's own digest


# --------------------------------------------------------------------------
# format
# --------------------------------------------------------------------------


def test_statuses_are_the_documented_ones():
    assert STATUSES == ("open", "explained", "needs-signal", "label-disputed", "accepted-risk")


def test_missing_file_gives_an_empty_book_without_writing(tmp_path):
    path = tmp_path / "new.json"
    book = Casebook.open(path)
    assert book.entries == {} and book.path == path
    assert not path.exists()
    with pytest.raises(AfterlookError, match="not found"):
        Casebook.open(path, create=False)


def test_file_is_sorted_pretty_json_with_trailing_newline(tmp_path):
    path = tmp_path / "book.json"
    book = Casebook.open(path)
    book.upsert(entry("b", "explained", z_key=1, a_key=2))
    book.upsert(entry("a", "open"))
    book.save()
    text = path.read_text(encoding="utf-8")
    doc = json.loads(text)  # json module as the parser
    assert doc["format"] == "afterlook-casebook" and doc["version"] == 1
    assert [e["case"] for e in doc["entries"]] == ["a", "b"]
    assert text == json.dumps(doc, indent=2, sort_keys=True) + "\n"
    again = Casebook.open(path)
    assert again.entries == book.entries


def test_upsert_keeps_created_and_pushes_previous_decisions_into_history(tmp_path):
    book = Casebook.open(tmp_path / "b.json")
    book.upsert(entry("c", "open", note="first", created="2026-01-01T00:00:00Z"))
    for k in range(HISTORY_LIMIT + 3):
        book.upsert(entry("c", STATUSES[k % 5], note=f"review {k}", created=f"2027-01-01T00:00:{k:02d}Z",
                          updated=f"2027-01-01T00:00:{k:02d}Z"))
    stored = book.entries["c"]
    assert stored["note"] == f"review {HISTORY_LIMIT + 2}"
    assert stored["created"] == "2026-01-01T00:00:00Z"  # the first review's
    hist = stored["history"]
    assert len(hist) == HISTORY_LIMIT
    # newest last: the decision just replaced, then older ones; the oldest ("first", review 0..2) dropped
    assert [h["note"] for h in hist] == [f"review {k}" for k in range(2, HISTORY_LIMIT + 2)]
    assert all("history" not in h for h in hist)


def test_a_status_change_keeps_the_earlier_review_whole_in_history(tmp_path):
    """Feature, scores, evidence, who and when of the earlier review survive; the raw snapshot is not copied."""
    book = Casebook.open(tmp_path / "b.json")
    first = entry("c", "explained", note="first", reviewer="ana", updated="2026-01-01T00:00:00Z",
                  derived_feature={"name": "r", "expression": "a / b"},
                  derived_features=[{"name": "r", "expression": "a / b"}],
                  before={"log_density": -3.0, "threshold": -9.0, "margin": 6.0, "flagged": False},
                  after={"log_density": -12.0, "threshold": -9.5, "margin": -2.5, "flagged": True},
                  evidence=[{"name": "a", "value": 1.0, "z": 0.2}], snapshot={"columns": {"a": 1.0, "b": 2.0}})
    book.upsert(first)
    book.upsert(entry("c", "needs-signal", note="second", reviewer="ben", updated="2026-02-01T00:00:00Z"))
    stored = book.entries["c"]
    assert stored.get("derived_feature") is None  # the new review named none
    (old,) = stored["history"]
    for key in ("status", "note", "reviewer", "updated", "derived_feature", "derived_features", "before", "after",
                "evidence"):
        assert old[key] == first[key], key
    assert "snapshot" not in old and "case" not in old and "history" not in old


def test_unknown_case_id_suggests_the_closest(tmp_path):
    book = Casebook.open(tmp_path / "b.json")
    book.upsert(entry("PS-01/2026-05-21T17:00", "open"))
    book.upsert(entry("PS-03/2026-01-02T04:00", "open"))
    with pytest.raises(AfterlookError, match=r"did you mean 'PS-01/2026-05-21T17:00'"):
        book.get("PS-01/2026-05-21T17:01")  # one character off
    with pytest.raises(AfterlookError, match=r"did you mean 'PS-03/2026-01-02T04:00'"):
        book.get("ps-03/2026-01-02t04:00 ")  # case and a trailing space
    with pytest.raises(AfterlookError) as info:
        book.get("something else entirely")
    assert "did you mean" not in info.value.message


@pytest.mark.parametrize("bad", [{"status": "open"}, {"case": "", "status": "open"}, {"case": "x", "status": "done"}])
def test_upsert_refuses_entries_without_case_or_with_unknown_status(tmp_path, bad):
    book = Casebook.open(tmp_path / "b.json")
    with pytest.raises(AfterlookError):
        book.upsert(bad)
    assert book.entries == {}


# --------------------------------------------------------------------------
# saving: backup, failures, conflicts
# --------------------------------------------------------------------------


def test_second_save_keeps_the_previous_file_as_bak(tmp_path):
    path = tmp_path / "book.json"
    book = Casebook.open(path)
    book.upsert(entry("a"))
    book.save()
    first = path.read_bytes()
    assert not backup_path(path).exists()
    book.upsert(entry("b"))
    book.save()
    assert backup_path(path).read_bytes() == first
    assert backup_path(path).name == "book.json.bak"
    assert [e["case"] for e in json.loads(path.read_bytes())["entries"]] == ["a", "b"]


def test_a_failing_write_leaves_the_old_book_and_no_temp_file(tmp_path, monkeypatch):
    import afterlook.store.casebook_file as store

    path = tmp_path / "book.json"
    book = Casebook.open(path)
    book.upsert(entry("a"))
    book.save()
    before = sha(path)

    real_replace = os.replace

    def replace(src, dst):
        if os.fspath(dst) == os.fspath(path):
            raise OSError(28, "No space left on device")
        return real_replace(src, dst)

    monkeypatch.setattr(store.os, "replace", replace)
    book.upsert(entry("b"))
    with pytest.raises(AfterlookError, match="No space left"):
        book.save()
    monkeypatch.undo()
    assert sha(path) == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["book.json", "book.json.bak"]


def test_concurrent_change_is_refused_and_new_state_goes_to_a_sibling(tmp_path):
    path = tmp_path / "pump.casebook.json"
    seed = Casebook.open(path)
    seed.upsert(entry("a"))
    seed.save()

    mine = Casebook.open(path)
    theirs = Casebook.open(path)
    theirs.upsert(entry("theirs", "explained"))
    theirs.save()
    on_disk = path.read_bytes()

    mine.upsert(entry("mine", "needs-signal"))
    with pytest.raises(CasebookConflict) as info:
        mine.save()
    err = info.value
    assert path.read_bytes() == on_disk  # untouched
    assert err.sibling.parent == tmp_path and err.sibling.name.startswith("pump.casebook.conflict-")
    assert err.sibling.name.endswith(".json")
    assert str(path) in err.message and str(err.sibling) in err.message
    assert err.exit_code == 2
    sibling = json.loads(err.sibling.read_bytes())  # json module
    assert sorted(e["case"] for e in sibling["entries"]) == ["a", "mine"]
    # a second refused save does not overwrite the first sibling
    with pytest.raises(CasebookConflict) as info2:
        mine.save()
    assert info2.value.sibling != err.sibling and err.sibling.exists()


def test_a_book_created_by_someone_else_after_opening_an_empty_one_is_not_overwritten(tmp_path):
    path = tmp_path / "b.json"
    mine = Casebook.open(path)
    other = Casebook.open(path)
    other.upsert(entry("other"))
    other.save()
    kept = path.read_bytes()
    mine.upsert(entry("mine"))
    with pytest.raises(CasebookConflict):
        mine.save()
    assert path.read_bytes() == kept


def test_an_editor_change_on_disk_is_also_a_conflict(tmp_path):
    path = tmp_path / "b.json"
    book = Casebook.open(path)
    book.upsert(entry("a"))
    book.save()
    edited = path.read_text().replace('"note": ""', '"note": "edited by hand"')
    path.write_text(edited)
    book.upsert(entry("b"))
    with pytest.raises(CasebookConflict):
        book.save()
    assert path.read_text() == edited


# --------------------------------------------------------------------------
# refusing files that are not (this version of) a casebook
# --------------------------------------------------------------------------

GOOD = json.dumps({"format": "afterlook-casebook", "version": 1,
                   "entries": [{"case": "a", "status": "open"}]}, indent=2)

BAD_FILES = {
    "garbage": b"\x00\x01garbage\xff\xfe",
    "empty": b"",
    "truncated": GOOD.encode()[: len(GOOD) // 2],
    "not-an-object": b"[1, 2, 3]\n",
    "wrong-format": json.dumps({"format": "afterlook-model", "version": 1, "entries": []}).encode(),
    "no-format": json.dumps({"version": 1, "entries": []}).encode(),
    "future-version": json.dumps({"format": "afterlook-casebook", "version": 2, "entries": []}).encode(),
    "string-version": json.dumps({"format": "afterlook-casebook", "version": "1", "entries": []}).encode(),
    "no-entries": json.dumps({"format": "afterlook-casebook", "version": 1}).encode(),
    "bad-status": json.dumps({"format": "afterlook-casebook", "version": 1,
                              "entries": [{"case": "a", "status": "fixed"}]}).encode(),
    "duplicate-case": json.dumps({"format": "afterlook-casebook", "version": 1,
                                  "entries": [{"case": "a", "status": "open"}, {"case": "a", "status": "open"}]}).encode(),
    "nan": b'{"format": "afterlook-casebook", "version": 1, "entries": [{"case": "a", "status": "open", "x": NaN}]}',
}


@pytest.mark.parametrize("kind", sorted(BAD_FILES))
def test_bad_files_are_refused_with_one_line_and_left_byte_identical(tmp_path, kind):
    path = tmp_path / "book.json"
    path.write_bytes(BAD_FILES[kind])
    digest = sha(path)
    with pytest.raises(AfterlookError) as info:
        Casebook.open(path)
    assert "\n" not in info.value.message and str(path) in info.value.message
    if kind == "future-version":
        assert "version 2" in info.value.message and "upgrade" in info.value.message
    assert sha(path) == digest
    assert sorted(p.name for p in tmp_path.iterdir()) == ["book.json"]


def test_a_folder_is_not_a_book(tmp_path):
    with pytest.raises(AfterlookError, match="folder"):
        Casebook.open(tmp_path)


def test_unknown_top_level_keys_survive_a_save(tmp_path):
    path = tmp_path / "b.json"
    path.write_text(json.dumps({"format": "afterlook-casebook", "version": 1, "entries": [],
                                "team": "north district"}))
    book = Casebook.open(path)
    book.upsert(entry("a"))
    book.save()
    assert json.loads(path.read_text())["team"] == "north district"


@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=st.one_of(st.binary(max_size=300),
                      st.builds(lambda d: json.dumps(d).encode(),
                                st.recursive(st.none() | st.booleans() | st.integers() | st.text(max_size=8),
                                             lambda c: st.lists(c, max_size=3)
                                             | st.dictionaries(st.sampled_from(
                                                 ["format", "version", "entries", "case", "status", "history"]),
                                                 c, max_size=4), max_leaves=12))))
def test_any_bytes_open_as_a_book_or_give_an_afterlook_error(tmp_path, data):
    path = tmp_path / "fuzz.json"
    path.write_bytes(data)
    try:
        book = Casebook.open(path)
    except AfterlookError as exc:
        assert "\n" not in exc.message
    else:
        assert all(isinstance(k, str) and e["status"] in STATUSES for k, e in book.entries.items())
    assert path.read_bytes() == data


def test_saving_keeps_the_book_permissions(tmp_path):
    import stat

    path = tmp_path / "shared.json"
    book = Casebook.open(path)
    book.upsert(entry("a"))
    book.save()
    os.chmod(path, 0o640)
    book.upsert(entry("b"))
    book.save()
    assert stat.S_IMODE(os.stat(path).st_mode) == 0o640
    assert stat.S_IMODE(os.stat(backup_path(path)).st_mode) == 0o640

"""The cache folder: where it is, switched off, entries that round-trip, and every failure read as "not there".

No outside reference applies: these are file-handling rules of our own (store/cache.py's docstring).
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import pytest

from afterlook.store import cache


def test_folder_follows_the_environment(tmp_path):
    assert cache.folder({"AFTERLOOK_CACHE_DIR": str(tmp_path)}) == tmp_path
    for off in ("", "off", "OFF", "0", "no", " none "):
        assert cache.folder({"AFTERLOOK_CACHE_DIR": off}) is None
    assert cache.folder({"XDG_CACHE_HOME": str(tmp_path)}) == tmp_path / "afterlook"
    assert cache.folder({}) == Path.home() / ".cache" / "afterlook"


def test_entry_key_is_stable_and_separates_parts():
    assert cache.entry_key("a", b"bc") == cache.entry_key("a", b"bc")
    assert cache.entry_key("ab", "c") != cache.entry_key("a", "bc")  # length-prefixed parts
    assert len(cache.entry_key("x")) == 64


def test_round_trip_and_a_missing_entry(tmp_path, monkeypatch):
    monkeypatch.setenv("AFTERLOOK_CACHE_DIR", str(tmp_path))
    key = cache.entry_key("k")
    assert cache.read("kind", key) is None
    assert cache.write("kind", key, {"expression": "log(x)"}) is True
    assert cache.read("kind", key) == {"expression": "log(x)"}
    assert [p.name for p in (tmp_path / "kind").iterdir()] == [f"{key}.json"]  # no temporary file left


def test_off_reads_and_writes_nothing(tmp_path, monkeypatch):
    monkeypatch.setenv("AFTERLOOK_CACHE_DIR", "off")
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path))
    assert cache.write("kind", cache.entry_key("k"), 1) is False
    assert cache.read("kind", cache.entry_key("k")) is None
    assert not any(tmp_path.iterdir())


@pytest.mark.parametrize("content", [b"", b"{not json", b'{"key": "other", "value": 1}', b"[1, 2]"])
def test_a_damaged_or_foreign_entry_reads_as_missing(tmp_path, monkeypatch, content):
    monkeypatch.setenv("AFTERLOOK_CACHE_DIR", str(tmp_path))
    key = cache.entry_key("k")
    (tmp_path / "kind").mkdir()
    (tmp_path / "kind" / f"{key}.json").write_bytes(content)
    assert cache.read("kind", key) is None
    assert cache.write("kind", key, 5) and cache.read("kind", key) == 5  # and is replaced by a good one


def test_a_folder_that_cannot_be_made_is_not_an_error(tmp_path, monkeypatch):
    blocker = tmp_path / "a file"
    blocker.write_text("x")
    monkeypatch.setenv("AFTERLOOK_CACHE_DIR", str(blocker / "below"))  # a folder under a file: never makeable
    assert cache.write("kind", cache.entry_key("k"), 1) is False
    assert cache.read("kind", cache.entry_key("k")) is None


def test_oldest_entries_are_removed_past_the_limit_once_per_process(tmp_path, monkeypatch):
    monkeypatch.setenv("AFTERLOOK_CACHE_DIR", str(tmp_path))
    monkeypatch.setattr(cache, "MAX_ENTRIES", 4)
    monkeypatch.setattr(cache, "_looked_at", set())
    folder = tmp_path / "kind"
    folder.mkdir()
    old = [cache.entry_key(str(i)) for i in range(5)]
    for i, key in enumerate(old):  # an earlier process's entries, oldest first
        (folder / f"{key}.json").write_text(json.dumps({"key": key, "value": i}))
        os.utime(folder / f"{key}.json", (1_000_000 + i, 1_000_000 + i))
    new = cache.entry_key("new")
    assert cache.write("kind", new, "v")  # 6 > 4: down to 3 (three quarters), the newest kept
    assert sorted(p.stem for p in folder.glob("*.json")) == sorted([new, old[4], old[3]])
    assert cache.read("kind", new) == "v" and cache.read("kind", old[4]) == 4
    for i in range(3):  # not looked at again in this process
        assert cache.write("kind", cache.entry_key(f"more {i}"), i)
    assert len(list(folder.glob("*.json"))) == 6


def test_writes_into_a_full_folder_scan_it_once(tmp_path, monkeypatch):
    monkeypatch.setenv("AFTERLOOK_CACHE_DIR", str(tmp_path))
    monkeypatch.setattr(cache, "_looked_at", set())
    scans = []
    real = os.scandir
    monkeypatch.setattr(cache.os, "scandir", lambda path: scans.append(path) or real(path))
    for i in range(40):
        cache.write("kind", cache.entry_key(str(i)), i)
    assert len(scans) == 1


def test_entries_are_written_whole_but_without_fsync(tmp_path, monkeypatch):
    # store.atomic's writer with durable=False: a temp file renamed into place, no fsync of file or folder
    monkeypatch.setenv("AFTERLOOK_CACHE_DIR", str(tmp_path))

    def no_fsync(fd):
        raise AssertionError("a cache entry is not worth an fsync")

    monkeypatch.setattr(os, "fsync", no_fsync)
    key = cache.entry_key("k")
    assert cache.write("kind", key, [1, 2]) and cache.read("kind", key) == [1, 2]

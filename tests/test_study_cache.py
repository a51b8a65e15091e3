"""The SQLite results cache: round trips, concurrent writers, keys, refused paths."""

from __future__ import annotations

import dataclasses
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pytest

from noiselab.common.errors import InputError
from noiselab.study.cache import (
    ResultsCache,
    digest,
    job_key,
    open_cache,
    pack_record,
    unpack_record,
)

ROOT = Path(__file__).resolve().parents[1]


@dataclasses.dataclass(frozen=True)
class _Record:
    bases: tuple[str, ...]
    probs: np.ndarray
    num_qubits: int
    engine_seconds: float
    notice: str | None = None
    batches: np.ndarray | None = None


def test_pack_unpack_round_trip() -> None:
    rng = np.random.default_rng(3)
    rec = _Record(("ZZ", "XX"), rng.random((2, 4)), 2, 0.25, None, None)
    back = unpack_record(_Record, pack_record(rec))
    assert back.bases == ("ZZ", "XX")
    np.testing.assert_array_equal(back.probs, rec.probs)  # bit-exact (np.savez)
    assert back.num_qubits == 2 and back.engine_seconds == 0.25
    assert back.notice is None and back.batches is None


def test_store_get_put_and_first_writer_wins(tmp_path: Path) -> None:
    store = ResultsCache(tmp_path / "c.db")
    assert store.get("k", "a") is None
    store.put("k", "a", b"first", 1.5)
    store.put("k", "a", b"second", 2.0)
    assert store.get("k", "a") == (b"first", 1.5)
    assert store.count() == 1 and store.count("k") == 1 and store.count("other") == 0
    # WAL journal (concurrent readers never block the writer)
    import sqlite3

    mode = sqlite3.connect(tmp_path / "c.db").execute("PRAGMA journal_mode").fetchone()[0]
    assert mode.lower() == "wal"


def test_disabled_cache_stores_nothing(tmp_path: Path) -> None:
    store = open_cache(enabled=False)
    store.put("k", "a", b"x")
    assert store.get("k", "a") is None and not store.enabled


def test_concurrent_processes_write_whole_entries(tmp_path: Path) -> None:
    db = tmp_path / "shared.db"
    code = textwrap.dedent(
        """
        import sys
        from noiselab.study.cache import ResultsCache
        store = ResultsCache(sys.argv[1])
        tag = sys.argv[2]
        for i in range(40):
            payload = (tag * 1000 + str(i)).encode()
            store.put("sim", f"{tag}-{i}", payload, float(i))
            store.put("sim", f"shared-{i}", b"same-for-all", 0.0)
        """
    )
    procs = [
        subprocess.Popen([sys.executable, "-c", code, str(db), tag]) for tag in ("a", "b", "c")
    ]
    assert all(p.wait(timeout=120) == 0 for p in procs)
    store = ResultsCache(db)
    assert store.count("sim") == 3 * 40 + 40
    for tag in ("a", "b", "c"):
        for i in range(40):
            payload, seconds = store.get("sim", f"{tag}-{i}")  # type: ignore[misc]
            assert payload == (tag * 1000 + str(i)).encode() and seconds == float(i)


def test_not_a_database_is_refused_in_one_line(tmp_path: Path) -> None:
    bad = tmp_path / "junk.db"
    bad.write_bytes(b"this is not sqlite" * 100)
    with pytest.raises(InputError, match="cache: cannot open") as info:
        ResultsCache(bad)
    assert "\n" not in str(info.value)
    with pytest.raises(InputError, match="folder"):
        ResultsCache(tmp_path)


def test_digest_depends_on_every_part() -> None:
    assert digest("a", {"x": 1}) == digest("a", {"x": 1})
    assert digest("a", {"x": 1}) != digest("a", {"x": 2})
    assert digest("a", b"\x00") != digest("a", b"\x01")


def test_job_key_follows_the_device_file(tmp_path: Path) -> None:
    device = tmp_path / "dev.yaml"
    device.write_text("name: a\n")
    study = tmp_path / "s.yaml"
    study.write_text("name: s\ndevice: dev.yaml\n")
    k1 = job_key("assess", study, {"seed": None})
    assert k1 == job_key("assess", study, {"seed": None})
    assert k1 != job_key("assess", study, {"seed": 3})
    device.write_text("name: b\n")
    assert job_key("assess", study, {"seed": None}) != k1
    assert job_key("assess", tmp_path / "missing.yaml", {}) is None

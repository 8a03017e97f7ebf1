"""Damaged journal records are never reused: each record's checksum is verified.

The damage is real: random bytes written into the journal file, inside the stored array
of one corner, where SQLite's own integrity check does not look (the test checks that it
still says "ok"). The reference for the recomputed corner is the first, undamaged run of
the same job: its margins must come back exactly.
"""

from __future__ import annotations

import json
import os
import sqlite3
from pathlib import Path

import pytest
from conftest import DEMO

from amploop.cli import main
from amploop.errors import JournalError
from amploop.sim.journal import Journal


def measure_demo(out: Path, capsys, *extra: str) -> tuple[dict, list[str]]:
    code = main(["measure", str(DEMO / "job.toml"), "--out", str(out), "--no-report",
                 "--workers", "1", *extra])
    assert code == 0
    err = [line for line in capsys.readouterr().err.splitlines() if line.strip()]
    return json.loads((out / "results.json").read_text()), err


def damage_record(journal: Path, key: str) -> int:
    """Write random bytes over the stored arrays of record ``key`` in the file itself;
    the number of bytes changed."""
    with sqlite3.connect(journal) as db:
        blob = db.execute("SELECT data FROM analyses WHERE key = ?", (key,)).fetchone()[0]
    db.close()
    header = 4 + int.from_bytes(blob[:4], "little")
    arrays = blob[header:]
    data = bytearray(journal.read_bytes())
    changed = 0
    chunk = 256
    # chunks of the arrays that sit whole inside one page of the file (a chunk across a
    # page boundary is split by SQLite's overflow-page pointer and is not found), and only
    # once (the frequency vector is the same in every record)
    for start in range(0, len(arrays) - chunk, chunk):
        at = data.find(arrays[start:start + chunk])
        if at >= 0 and data.find(arrays[start:start + chunk], at + 1) < 0:
            data[at:at + chunk] = os.urandom(chunk)
            changed += chunk
    journal.write_bytes(bytes(data))
    return changed


def test_a_damaged_record_is_recomputed_and_reported_in_one_line(tmp_path, capsys):
    out = tmp_path / "out"
    first, _ = measure_demo(out, capsys)
    victim = first["corners"][2]
    journal = out / "journal.sqlite"
    assert not journal.with_name("journal.sqlite-wal").exists()  # closed: all in the file
    assert damage_record(journal, victim["journal_key"]) > 10_000
    with sqlite3.connect(journal) as db:  # the premise: SQLite itself sees nothing wrong
        assert db.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    db.close()

    again, err = measure_demo(out, capsys)
    assert again["ac_analyses"] == {"run": 2, "reused": 18}  # the damaged corner, rerun
    assert again["corners"] == first["corners"]  # exactly the undamaged figures
    notes = [line for line in err if "damaged journal record" in line]
    assert len(notes) == 1, err
    assert victim["name"] in notes[0] and "checksum mismatch" in notes[0]

    # the recomputed record replaced the damaged one: the next run reuses everything
    third, err = measure_demo(out, capsys)
    assert third["ac_analyses"] == {"run": 0, "reused": 20}
    assert not any("damaged" in line for line in err)


def test_the_report_refuses_a_damaged_record_in_one_line(tmp_path, capsys):
    out = tmp_path / "out"
    first, _ = measure_demo(out, capsys)
    key = first["corners"][0]["journal_key"]
    damage_record(out / "journal.sqlite", key)
    with Journal(out / "journal.sqlite", readonly=True) as journal, \
            pytest.raises(JournalError, match="damaged: checksum mismatch"):
        journal.get(key)
    assert main(["report", str(out)]) == 4
    err = [line for line in capsys.readouterr().err.splitlines() if line.strip()]
    assert len(err) == 1 and "damaged" in err[0] and "rerun" in err[0], err


def make_schema_1(journal: Path) -> None:
    """The journal as the first schema stored it: no checksum column, user_version 1."""
    with sqlite3.connect(journal) as db:
        db.execute("ALTER TABLE analyses DROP COLUMN checksum")
        db.execute("PRAGMA user_version=1")
    db.close()


def test_a_journal_without_checksums_is_upgraded_and_its_records_recomputed(tmp_path, capsys):
    out = tmp_path / "out"
    first, _ = measure_demo(out, capsys)
    make_schema_1(out / "journal.sqlite")

    assert main(["report", str(out)]) == 4  # a reader cannot upgrade: it says what to do
    err = [line for line in capsys.readouterr().err.splitlines() if line.strip()]
    assert len(err) == 1 and "schema 1" in err[0] and "rerun measure or tune" in err[0], err

    again, err = measure_demo(out, capsys)
    assert again["ac_analyses"] == {"run": 20, "reused": 0}  # nothing unverified reused
    assert again["corners"] == first["corners"]
    notes = [line for line in err if "upgraded from schema 1" in line]
    assert len(notes) == 1 and "10 records" in notes[0], err
    assert not any("damaged" in line for line in err)
    with sqlite3.connect(out / "journal.sqlite") as db:
        assert db.execute("PRAGMA user_version").fetchone()[0] == 2
        assert db.execute("SELECT COUNT(*) FROM analyses WHERE checksum IS NULL"
                          ).fetchone()[0] == 0
    db.close()
    third, err = measure_demo(out, capsys)
    assert third["ac_analyses"] == {"run": 0, "reused": 20}
    assert not any("upgraded" in line for line in err)

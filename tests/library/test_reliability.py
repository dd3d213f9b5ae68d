"""A killed import leaves whole entries only; readers are never told the library is locked.

These start real processes (``python -m refdb``) against a SQLite file, as users do.
"""

from __future__ import annotations

import io
import os
import signal
import sqlite3
import subprocess
import sys
import time

import pytest

from refdb.library import open_library
from refdb.library.transfer import export_library
from tests.library._entries import computed_entry

N_ENTRIES = 300
N_LINES = 300


def _refdb(*args: str, db: str) -> list[str]:
    return [sys.executable, "-m", "refdb", "--db", db, *args]


@pytest.fixture(scope="module")
def big_export(tmp_path_factory):
    """An export of N_ENTRIES synthetic entries of N_LINES reflections each."""
    d = tmp_path_factory.mktemp("export")
    with open_library(d / "src.sqlite", create=True) as lib:
        for i in range(N_ENTRIES):
            lib.add(computed_entry(i, n_lines=N_LINES))
        buf = io.StringIO()
        export_library(lib, buf)
    path = d / "big.jsonl"
    path.write_text(buf.getvalue(), encoding="utf-8")
    return path


def _count(db: str) -> int:
    con = sqlite3.connect(db, timeout=30)
    try:
        return con.execute("SELECT count(*) FROM entries").fetchone()[0]
    except sqlite3.OperationalError:
        return 0
    finally:
        con.close()


def test_sigkill_during_bulk_load_leaves_whole_entries(tmp_path, big_export):
    db = str(tmp_path / "lib.sqlite")
    subprocess.run(_refdb("init", db=db), check=True, capture_output=True)
    proc = subprocess.Popen(_refdb("load", str(big_export), db=db), stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    deadline = time.monotonic() + 60
    while _count(db) < 20 and time.monotonic() < deadline and proc.poll() is None:
        time.sleep(0.02)
    assert proc.poll() is None, "the load finished before it could be interrupted; make the export bigger"
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait()

    con = sqlite3.connect(db)
    assert con.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    assert con.execute("PRAGMA foreign_key_check").fetchall() == []
    n = con.execute("SELECT count(*) FROM entries").fetchone()[0]
    per_entry = con.execute(
        "SELECT e.id, count(r.seq) FROM entries e LEFT JOIN reflections r ON r.entry_id = e.id GROUP BY e.id"
    ).fetchall()
    con.close()
    assert 0 < n < N_ENTRIES
    assert all(c == N_LINES for _, c in per_entry), "an entry was left half-written"

    again = subprocess.run(_refdb("load", str(big_export), db=db), capture_output=True, text=True)
    assert again.returncode == 0, again.stderr
    assert f"Loaded {N_ENTRIES - n} new entries; {n} were already present" in again.stderr
    con = sqlite3.connect(db)
    assert con.execute("SELECT count(*), count(DISTINCT content_hash) FROM entries").fetchone() == (N_ENTRIES, N_ENTRIES)
    assert con.execute("SELECT count(*) FROM reflections").fetchone()[0] == N_ENTRIES * N_LINES
    con.close()


def test_readers_while_one_writes(tmp_path, big_export):
    db = str(tmp_path / "lib.sqlite")
    subprocess.run(_refdb("init", db=db), check=True, capture_output=True)
    writer = subprocess.Popen(_refdb("load", str(big_export), db=db), stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    failures: list[str] = []
    runs = 0
    while writer.poll() is None and runs < 40:
        readers = [
            subprocess.Popen(_refdb(cmd, "--json", db=db), stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
            for cmd in ("list", "stats")
        ]
        for r in readers:
            _, errtext = r.communicate(timeout=120)
            runs += 1
            if r.returncode != 0:
                failures.append(errtext.strip())
    _, werr = writer.communicate(timeout=300)
    assert writer.returncode == 0, werr
    assert runs >= 2, "no reader ran while the writer was busy"
    assert failures == []

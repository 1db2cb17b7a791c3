"""The survey journal: an SQLite file beside the results that records every star as it finishes.

One row per finished star (``idx``, ``star``, ``status``, the result row as JSON), committed before the
next star is recorded, so a crash or a kill loses at most the stars still being measured. The file is
in write-ahead-log mode with ``synchronous=FULL``: a committed star survives a crash of the process and
of the operating system (SQLite documentation, "Write-Ahead Logging" and "PRAGMA synchronous").
Only the survey's parent process writes to it.

The ``meta`` table keeps what the run was started with (star list, options, version) so that a resumed
run can refuse to mix results measured with different options.
"""

from __future__ import annotations

import json
import sqlite3
from contextlib import closing
from datetime import datetime, timezone
from pathlib import Path

import numpy as np

from .errors import InputError

__all__ = ["JOURNAL_SUFFIX", "journal_path", "Journal", "plain"]

#: Appended to the results file name: ``results.ecsv`` -> ``results.ecsv.journal.sqlite``.
JOURNAL_SUFFIX = ".journal.sqlite"

_SCHEMA = """
CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS stars (
    idx INTEGER PRIMARY KEY,
    star TEXT NOT NULL,
    status TEXT NOT NULL,
    payload TEXT NOT NULL,
    finished TEXT NOT NULL
);
"""


def journal_path(results_path):
    """The journal file of a results file: the same name with :data:`JOURNAL_SUFFIX` appended."""
    p = Path(results_path)
    return p.with_name(p.name + JOURNAL_SUFFIX)


def plain(value):
    """``value`` with numpy scalars, arrays and tuples turned into JSON-ready Python objects (NaN kept)."""
    if isinstance(value, dict):
        return {str(k): plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [plain(v) for v in value]
    if isinstance(value, np.ndarray):
        return plain(value.tolist())
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, Path):
        return str(value)
    return value


def _now():
    return datetime.now(timezone.utc).isoformat(timespec="seconds")


class Journal:
    """An open survey journal.

    Use :meth:`open`; close it with :meth:`close` or a ``with`` block.

    Parameters
    ----------
    path : Path
    connection : sqlite3.Connection
    """

    def __init__(self, path, connection):
        self.path = Path(path)
        self._db = connection

    @classmethod
    def open(cls, path, *, meta, resume=False):
        """Open (``resume=True``) or start afresh (``resume=False``) the journal at ``path``.

        Parameters
        ----------
        path : str or path-like
        meta : dict
            What this run was started with. ``meta['options']`` must equal the journal's when resuming.
        resume : bool
            Keep the stars already recorded. False deletes an existing journal first.

        Raises
        ------
        InputError
            When resuming a journal whose options differ from ``meta['options']``, or a file that is
            not a journal.
        """
        path = Path(path)
        path.parent.mkdir(parents=True, exist_ok=True)
        if not resume:
            for p in (path, Path(str(path) + "-wal"), Path(str(path) + "-shm")):
                if p.exists():
                    p.unlink()
        try:
            db = sqlite3.connect(path, isolation_level=None)
            db.execute("PRAGMA journal_mode=WAL")
            db.execute("PRAGMA synchronous=FULL")
            db.executescript(_SCHEMA)
        except sqlite3.DatabaseError as e:
            raise InputError(f"{path}: not a survey journal ({e}); delete it or run without resume") from e
        journal = cls(path, db)
        old = journal.meta()
        if resume and old.get("options") is not None:
            new = json.loads(json.dumps(plain(meta.get("options"))))
            if old["options"] != new:
                journal.close()
                diff = sorted(k for k in set(old["options"]) | set(new) if old["options"].get(k) != new.get(k))
                raise InputError(
                    f"{path}: cannot resume: the journal was started with different options "
                    f"({', '.join(diff)}); resume with the same options or start again without resume"
                )
        if not old:
            with db:
                db.executemany("INSERT OR REPLACE INTO meta VALUES (?, ?)",
                               [(k, json.dumps(plain(v))) for k, v in dict(meta, started=_now()).items()])
        return journal

    def meta(self):
        """The journal's metadata as a dict."""
        return {k: json.loads(v) for k, v in self._db.execute("SELECT key, value FROM meta")}

    def finished(self):
        """Row indices of the stars already recorded (a set)."""
        return {i for (i,) in self._db.execute("SELECT idx FROM stars")}

    def stars(self):
        """``{row index: star name}`` of the stars already recorded."""
        return dict(self._db.execute("SELECT idx, star FROM stars"))

    def __len__(self):
        return self._db.execute("SELECT COUNT(*) FROM stars").fetchone()[0]

    def record(self, index, star, status, payload):
        """Record one finished star and commit.

        Parameters
        ----------
        index : int
        star : str
        status : str
            'measured', 'limit' or 'failed'.
        payload : dict
            ``{'row': {...}, ...}``: JSON-ready (NaN allowed).
        """
        text = json.dumps(plain(payload))
        with self._db:
            self._db.execute("INSERT OR REPLACE INTO stars VALUES (?, ?, ?, ?, ?)",
                             (int(index), str(star), str(status), text, _now()))

    def payloads(self):
        """Iterate ``(index, payload)`` in row order, one at a time (the journal is never loaded whole)."""
        with closing(self._db.execute("SELECT idx, payload FROM stars ORDER BY idx")) as cursor:
            for index, text in cursor:
                yield index, json.loads(text)

    def counts(self):
        """``{status: number of stars}``."""
        return dict(self._db.execute("SELECT status, COUNT(*) FROM stars GROUP BY status"))

    def close(self):
        """Checkpoint the write-ahead log into the main file and close."""
        if self._db is not None:
            try:
                self._db.execute("PRAGMA wal_checkpoint(TRUNCATE)")
            except sqlite3.DatabaseError:  # pragma: no cover - closing anyway
                pass
            self._db.close()
            self._db = None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()


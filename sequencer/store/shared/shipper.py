"""Feeding the shared results database from a run folder's journal, in the background.

The station writes every result to its own run folder first (journal, SQLite, CSV), exactly as
without a shared database; a `Shipper` thread then reads the journal's new complete lines and
sends them to PostgreSQL (sequencer.store.shared.pgstore), with the run and its sessions from
manifest.json.
When the database cannot be reached it waits (0.2 s, doubling to 5 s) and tries again, so the
station never waits for the network. Nothing is lost (the journal holds it all) and nothing is
stored twice (writes are keyed by run, pass and device, and replaced only by a later entry).

At the end of a run `finish` gives the database up to the station's `wait_at_end`; what is still
unsent then waits in the journal, and `ccbench upload RUN_DIR` (any time later) sends it.
"""

from __future__ import annotations

import json
import logging
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from sequencer.model.errors import RecipeError, StoreError
from sequencer.recipe.resultsdb import SharedDatabase
from sequencer.recipe.yamlsource import parse_yaml
from sequencer.store.oldnames import current
from sequencer.store.runfolder import MANIFEST_FILE, read_manifest
from sequencer.store.runstore import JOURNAL_FILE

log = logging.getLogger(__name__)

RETRY_FIRST_S = 0.2
RETRY_MOST_S = 5.0
POLL_S = 0.2  # how often a caught-up shipper looks for new journal lines
BATCH = 50  # journal entries per transaction


@dataclass
class Shipper:
    """Sends one run folder's journal to the shared database (`start` for the background
    thread, `sync` for one go in the foreground, `finish` to end)."""

    folder: Path
    database: SharedDatabase
    sleep: Callable[[float], None] = time.sleep
    clock: Callable[[], float] = time.monotonic
    poll_s: float = POLL_S
    sent: int = 0  # entries that changed the shared database
    offset: int = 0  # bytes of the journal known to be in the shared database
    problem: str = ""  # the last reason the database could not be used
    _conn: Any = None
    _run_id: int | None = None
    _known: dict[str, list[str]] = field(default_factory=dict)
    _manifest_stamp: tuple[int, int] | None = None
    _stop: threading.Event = field(default_factory=threading.Event)
    _thread: threading.Thread | None = None

    def start(self) -> Shipper:
        self._thread = threading.Thread(target=self._loop, name="results-shipper", daemon=True)
        self._thread.start()
        return self

    def _loop(self) -> None:
        delay = RETRY_FIRST_S
        while not self._stop.is_set():
            if self._try_sync():
                delay = RETRY_FIRST_S
                self._stop.wait(self.poll_s)
            else:
                self._stop.wait(delay)
                delay = min(2 * delay, RETRY_MOST_S)

    def _try_sync(self) -> bool:
        from sequencer.store.shared.pgstore import ERRORS  # start-up speed: psycopg when used

        try:
            self.sync()
        except (*ERRORS, StoreError) as exc:
            self._lost(exc)
            return False
        except Exception as exc:  # a bug must not end the thread unseen: it is the news at the end
            log.warning("shared database: %s", exc, exc_info=True)
            self._lost(exc)
            return False
        return True

    def sync(self) -> int:
        """Send every complete journal line not yet in the database; returns how many."""
        conn = self._connection()
        self._ship_manifest(conn)
        from sequencer.store.shared import pgstore  # start-up speed: psycopg only when used

        total = 0
        while True:
            entries, size = self._read_new(BATCH)
            if not entries:
                return total
            changed = pgstore.write_entries(conn, self._run, entries, self._known["device"])
            self.offset += size
            self.sent += changed
            total += changed

    def pending(self) -> int:
        """Complete journal lines not yet known to be in the database."""
        path = self.folder / JOURNAL_FILE
        if not path.exists():
            return 0
        with open(path, "rb") as f:
            f.seek(self.offset)
            return sum(1 for raw in f if raw.endswith(b"\n"))

    def finish(self, wait_s: float | None = None) -> str:
        """Stop the thread, then try (up to `wait_s`) to send what is left; returns the line
        for the screen. Never raises."""
        self._stop.set()
        if self._thread is not None:
            self._thread.join()
        wait = self.database.wait_at_end_s if wait_s is None else wait_s
        deadline, delay = self.clock() + wait, RETRY_FIRST_S
        while not self._try_sync() and self.clock() < deadline:
            self.sleep(min(delay, max(0.0, deadline - self.clock())))
            delay = min(2 * delay, RETRY_MOST_S)
        self._close()
        return self.outcome()

    def outcome(self) -> str:
        left = self.pending()
        where = f"shared database {self.database.shown}"
        if not left:
            return f"{where}: every result of the run is stored ({self.sent} sent by this session)"
        return (
            f"{where} not reached ({self.problem}); "
            f"{left} result{'s wait' if left != 1 else ' waits'} in "
            f"{self.folder / JOURNAL_FILE}; `ccbench upload {self.folder}` sends them"
        )

    # --- the connection ----------------------------------------------------------------------

    @property
    def _run(self) -> int:
        assert self._run_id is not None
        return self._run_id

    def _connection(self) -> Any:
        from sequencer.store.shared import pgstore  # start-up speed: psycopg only when used

        if self._conn is not None:
            return self._conn
        conn = pgstore.connect(self.database.url)
        try:
            pgstore.migrate(conn, self.database.shown)
            self._known = {t: pgstore.columns(conn, t) for t in ("run", "session", "device")}
            manifest = read_manifest(self.folder)
            self._run_id = pgstore.upsert_run(conn, manifest, self._known["run"])
            if self.offset == 0:
                self.offset = self._skip_to(pgstore.last_seq(conn, self._run_id))
        except BaseException:
            conn.close()
            raise
        self._conn, self._manifest_stamp = conn, None
        return conn

    def _ship_manifest(self, conn: Any) -> None:
        from sequencer.store.shared import pgstore  # start-up speed: psycopg only when used

        stat = (self.folder / MANIFEST_FILE).stat()
        stamp = (stat.st_mtime_ns, stat.st_size)
        if stamp == self._manifest_stamp:
            return
        manifest = read_manifest(self.folder)
        pgstore.upsert_run(conn, manifest, self._known["run"])
        sessions = manifest.get("sessions", [])
        pgstore.upsert_sessions(conn, self._run, sessions, self._known["session"])
        self._manifest_stamp = stamp

    def _lost(self, exc: BaseException) -> None:
        text = getattr(exc, "why", None) or str(exc).strip() or type(exc).__name__
        self.problem = text.splitlines()[0]
        log.info("shared database: %s", self.problem)
        self._close()

    def _close(self) -> None:
        conn, self._conn = self._conn, None
        if conn is not None:
            try:
                conn.close()
            except Exception as exc:  # closing a broken link must not end the shipper
                log.info("shared database: close failed: %s", exc)

    # --- the journal -------------------------------------------------------------------------

    def _read_new(self, limit: int) -> tuple[list[dict[str, Any]], int]:
        """Up to `limit` complete lines after `offset`, and their size in bytes."""
        path = self.folder / JOURNAL_FILE
        if not path.exists():
            return [], 0
        entries, size = [], 0
        with open(path, "rb") as f:
            f.seek(self.offset)
            for raw in f:
                if not raw.endswith(b"\n") or len(entries) >= limit:
                    break  # a line being written, or enough for one transaction
                entries.append(_entry(path, raw))
                size += len(raw)
        return entries, size

    def _skip_to(self, seq: int) -> int:
        """The byte offset just after the journal line with sequence number `seq`."""
        path = self.folder / JOURNAL_FILE
        if seq <= 0 or not path.exists():
            return 0
        offset = 0
        with open(path, "rb") as f:
            for raw in f:
                if not raw.endswith(b"\n") or _entry(path, raw)["seq"] > seq:
                    break
                offset += len(raw)
        return offset


def _entry(path: Path, raw: bytes) -> dict[str, Any]:
    try:
        entry = json.loads(raw)
    except ValueError:
        raise StoreError(f"{path}: a damaged line stops the upload here") from None
    if not isinstance(entry, dict) or "seq" not in entry:
        raise StoreError(f"{path}: a line that is not a journal entry stops the upload here")
    return current(entry)  # a journal of before schema 8 says `pass` for the round


# --- the run command's side --------------------------------------------------------------------


def check_driver(database: SharedDatabase | None) -> None:
    """Refuse, before anything starts, a station with a shared database but no driver for it."""
    if database is None:
        return
    try:
        import psycopg  # noqa: F401 - start-up speed: loaded only to know it is there
    except ImportError:
        raise RecipeError(
            "station",
            None,
            "results_database",
            "needs the PostgreSQL driver: pip install 'ccbench[postgres]'",
        ) from None


def station_database(folder: Path) -> SharedDatabase | None:
    """The shared database named by the station text stored with the run, if any."""
    manifest = read_manifest(folder)
    source = parse_yaml(manifest.get("station_text") or "{}", f"{folder}/{MANIFEST_FILE}")
    if not isinstance(source.data, dict):
        return None
    # Start-up speed: the station format builds pydantic models at import; only this reads it.
    from sequencer.recipe.stationbuild import parse_results_database

    return parse_results_database(source, source.data.get("results_database"))

"""The ledger as a station uses it: `FileLedger` (the SQLite file in the data folder, the
default) or `ServerLedger` (a PostgreSQL server shared by several instruments, with a local
spool so that an outage loses nothing).

Both offer what the station needs and nothing else: open and check, what this instrument
already has, claim a file, record an outcome, a connection for redos. `FileLedger` passes
errors on (the station retries them with backoff, as it always has). `ServerLedger` never
stops the station for an unreachable server: outcomes then go to the spool (`spool.py`), a
replayer thread records them, oldest first and each exactly once (idempotent record keys),
as soon as the server answers, and announces each run as it is recorded.
"""
from __future__ import annotations

import contextlib
import os
import sqlite3
import threading
import time
import uuid
from collections.abc import Callable
from pathlib import Path
from typing import Any

from processing.provenance import Provenance
from processing.results import ResultFormatError, RunResult, from_json
from processing.run_digest import RunDigest
from processing.station import ledger
from processing.station.events import (
    ClaimResumed,
    LedgerOffline,
    LedgerOnline,
    RunSpooled,
    StationEvent,
    StationProblem,
)
from processing.station.ledger import Claim, LedgerError, LedgerUnavailable, RunRecord
from processing.station.spool import Spool, SpooledOutcome, spool_path

Emit = Callable[[StationEvent], None]
# the station's announcement of a run recorded from the spool: (record, result, result JSON)
Announce = Callable[[RunRecord, "RunResult | None", "str | None"], None]
REPLAY_FIRST_DELAY = 0.25
REPLAY_LONGEST_DELAY = 2.0  # a returning server is noticed within this


class FileLedger:
    """The SQLite ledger in the data folder: one connection per thread; errors go to the caller."""

    def __init__(self, location: str | Path, data_dir: Path, instrument: str, emit: Emit) -> None:
        self.location = location
        self.data_dir = data_dir
        self.instrument = instrument
        self.emit = emit
        self.where = ledger.describe_ledger(location)
        self._local = threading.local()

    # -------------------------------------------------------------- connections

    def conn(self) -> ledger.Connection:
        conn = getattr(self._local, "conn", None)
        if conn is None:
            conn = ledger.open_ledger(self.location)
            self._local.conn = conn
        return conn

    def drop_conn(self) -> None:
        """Forget this thread's connection after a failure (the next use opens a fresh one)."""
        conn = getattr(self._local, "conn", None)
        self._local.conn = None
        if conn is not None:
            try:
                conn.close()
            except (sqlite3.Error, LedgerError):
                pass  # a broken connection is dropped all the same

    # -------------------------------------------------------------- the station's needs

    def open(self) -> None:
        """Refuse a damaged ledger, adopt runs from before instruments, drop leftover claims
        (not in `runs`, so the catch-up redoes them)."""
        conn = self.conn()
        problem = ledger.integrity_problem(conn, self.where)
        if problem is not None:
            raise LedgerError(problem)
        try:
            ledger.adopt_unnamed_runs(conn, self.instrument)
            for claim in ledger.list_claims(conn, self.instrument):
                ledger.drop_claim(conn, claim.claim_id)
                self.emit(ClaimResumed(claim.path))
        except sqlite3.Error as error:
            raise ledger.ledger_problem(self.where, error) from None

    def start(self, announce: Announce) -> None:
        """Nothing runs in the background for the file."""

    def stop(self) -> None:
        """Nothing to stop."""

    def known(self) -> tuple[dict[str, str | None], dict[str, tuple[int, int]]]:
        """(path -> sha256, path -> (size, mtime)) of this instrument's newest versions."""
        conn = self.conn()
        return ledger.latest_sha_by_path(conn, self.instrument), ledger.latest_stat_by_path(conn, self.instrument)

    def latest(self, path: str) -> tuple[int, str | None] | None:
        """(run id, sha256) of the newest version of `path`, or None."""
        record = ledger.latest_run_for_path(self.conn(), path, self.instrument)
        return None if record is None else (record.run_id, record.sha256)

    def claim(self, path: str, sha256: str | None) -> Claim:
        return ledger.claim_file(self.conn(), path, sha256, os.getpid(), self.instrument)

    def drop_claim(self, claim_id: int) -> None:
        ledger.drop_claim(self.conn(), claim_id)

    def record(self, path: str, sha256: str | None, status: str, *, result: RunResult | None = None,
               result_json: str | None = None, claim_id: int | None = None, digest: RunDigest | None = None,
               **fields: Any) -> RunRecord | None:
        """Record an outcome; None would mean "kept for later" (never for the file)."""
        return ledger.record_run(
            self.conn(), path, sha256, status, result=result, result_json=result_json, digest=digest, claim_id=claim_id,
            instrument=self.instrument, **fields,
        )

    batches = True  # several records may share one transaction (`batch`)

    def batch(self) -> contextlib.AbstractContextManager[ledger.Connection]:
        """`with store.batch():` the records made inside share one transaction (this thread's)."""
        return ledger.one_transaction(self.conn())

    @property
    def waiting(self) -> int:
        """Outcomes kept for later (the file keeps none)."""
        return 0

    @property
    def offline_since(self) -> float | None:
        return None


class ServerLedger(FileLedger):
    """The ledger on a server, with the local spool for outages (see the module's doc)."""

    batches = False  # each record is kept in the spool on its own when the server is away

    def __init__(self, location: str | Path, data_dir: Path, instrument: str, emit: Emit) -> None:
        super().__init__(location, data_dir, instrument, emit)
        self._spools = threading.local()
        self._state = threading.Lock()
        self._waiting = 0
        self._offline_since: float | None = None
        self._wake = threading.Event()
        self._stopping = threading.Event()
        self._replayer: threading.Thread | None = None
        self._announce: Announce | None = None
        self._replayed_since_offline = 0

    def spool(self) -> Spool:
        spool = getattr(self._spools, "spool", None)
        if spool is None:
            spool = Spool(self.data_dir)
            self._spools.spool = spool
        return spool

    # -------------------------------------------------------------- online / offline

    def _went_offline(self, error: BaseException) -> None:
        self.drop_conn()
        with self._state:
            first = self._offline_since is None
            if first:
                self._offline_since = time.monotonic()
                self._replayed_since_offline = 0
        if first:
            self.emit(LedgerOffline(self.where, str(error)))

    @property
    def offline_since(self) -> float | None:
        return self._offline_since

    @property
    def waiting(self) -> int:
        return self._waiting

    # -------------------------------------------------------------- the station's needs

    def open(self) -> None:
        """Redo the files left claimed; check the server's schema when it answers (a newer
        schema is refused at once); an unreachable server only means starting offline."""
        spool = self.spool()
        for claim in spool.claims():
            spool.drop_claim(claim.claim_id)
            self.emit(ClaimResumed(claim.path))
        self._waiting = spool.waiting()
        try:
            self.conn()
        except LedgerUnavailable as error:
            self._went_offline(error)

    def start(self, announce: Announce) -> None:
        self._announce = announce
        self._replayer = threading.Thread(target=self._run_replayer, name="bandwatch-replayer", daemon=True)
        self._replayer.start()
        if self._waiting:
            self._wake.set()

    def stop(self) -> None:
        self._stopping.set()
        self._wake.set()
        if self._replayer is not None:
            self._replayer.join(timeout=30)
        if self._waiting:
            self.emit(StationProblem(
                f"{self._waiting} outcome(s) wait in the local spool ({spool_path(self.data_dir)}); "
                "they are recorded when the ledger server answers (the next start tries again)"
            ))

    def known(self) -> tuple[dict[str, str | None], dict[str, tuple[int, int]]]:
        spool = self.spool()
        if self._offline_since is None:
            try:
                conn = self.conn()
                spool.refresh_known(
                    ledger.latest_sha_by_path(conn, self.instrument), ledger.latest_stat_by_path(conn, self.instrument)
                )
            except LedgerUnavailable as error:
                self._went_offline(error)
        return spool.known_sha(), spool.known_stat()

    def latest(self, path: str) -> tuple[int, str | None] | None:
        found = self.spool().known_for(path)
        return None if found is None else (found[1] or 0, found[0])

    def claim(self, path: str, sha256: str | None) -> Claim:
        return self.spool().claim(path, sha256, os.getpid())

    def drop_claim(self, claim_id: int) -> None:
        self.spool().drop_claim(claim_id)

    def record(self, path: str, sha256: str | None, status: str, *, result: RunResult | None = None,
               result_json: str | None = None, claim_id: int | None = None, digest: RunDigest | None = None,
               **fields: Any) -> RunRecord | None:
        """Record on the server when it answers and nothing older waits; else keep the outcome
        in the spool (returns None, a RunSpooled event says so) for the replayer, which
        records it from its JSON."""
        if result is not None and result_json is None:
            from processing.results import to_json

            result_json = to_json(result)
        fields = dict(fields, sha256=sha256, status=status)
        fields.setdefault("processed_at", ledger.now_iso())
        if isinstance(fields.get("provenance"), Provenance):
            fields["provenance"] = fields["provenance"].to_dict()  # the spool keeps fields as JSON
        key = uuid.uuid4().hex
        spool = self.spool()
        if self._offline_since is None and self._waiting == 0:
            try:
                record = ledger.record_run(
                    self.conn(), path, sha256, status, result=result, result_json=result_json, digest=digest,
                    instrument=self.instrument, record_key=key, **_record_fields(fields),
                )
            except LedgerUnavailable as error:
                self._went_offline(error)  # whether it was written is settled by the key at replay
            else:
                if claim_id is not None:
                    spool.drop_claim(claim_id)
                spool.remember(path, sha256, fields.get("size_bytes"), fields.get("mtime_ns"), record.run_id)
                return record
        with self._state:
            self._waiting = spool.add(key, path, fields, result_json, claim_id)
            waiting = self._waiting
        self.emit(RunSpooled(path, status, waiting))
        self._wake.set()
        return None

    # -------------------------------------------------------------- replay

    def _run_replayer(self) -> None:
        delay = REPLAY_FIRST_DELAY
        while not self._stopping.is_set():
            self._wake.wait(delay)
            self._wake.clear()
            if self._stopping.is_set():
                return
            if self._waiting == 0 and self._offline_since is None:
                delay = REPLAY_LONGEST_DELAY
                continue
            try:
                self._replay_waiting()
                delay = REPLAY_FIRST_DELAY
            except LedgerUnavailable as error:
                self._went_offline(error)
                delay = min(REPLAY_LONGEST_DELAY, max(REPLAY_FIRST_DELAY, delay * 2))
            except (LedgerError, sqlite3.Error, OSError) as error:
                self.drop_conn()
                self.emit(StationProblem(f"could not replay the spool into {self.where}: {error}; trying again"))
                delay = REPLAY_LONGEST_DELAY * 5

    def _replay_waiting(self) -> None:
        """Record every spooled outcome, oldest first; mark the ledger online when none is left."""
        spool = self.spool()
        conn = self.conn()
        while not self._stopping.is_set():
            batch = spool.oldest()
            if not batch:
                break
            for outcome in batch:
                record = self._replay_one(conn, outcome)
                with self._state:
                    spool.recorded(outcome, record.run_id)
                    self._waiting = spool.waiting()
                    self._replayed_since_offline += 1
                self._announce_replayed(record, outcome)
        with self._state:
            back = self._offline_since is not None and self._waiting == 0
            replayed = self._replayed_since_offline
            if back:
                self._offline_since = None
        if back:
            self.emit(LedgerOnline(self.where, replayed))

    def _replay_one(self, conn: ledger.Connection, outcome: SpooledOutcome) -> RunRecord:
        result = _decoded(outcome.result_json)
        fields = outcome.fields
        return ledger.record_run(
            conn, outcome.path, fields.get("sha256"), fields["status"], result=result, result_json=outcome.result_json,
            instrument=self.instrument, record_key=outcome.record_key, **_record_fields(fields),
        )

    def _announce_replayed(self, record: RunRecord, outcome: SpooledOutcome) -> None:
        if self._announce is None:
            return
        try:
            self._announce(record, _decoded(outcome.result_json), outcome.result_json)
        except Exception as error:  # announcing must never stop the replay (the run is recorded)
            self.emit(StationProblem(f"run {record.run_id} recorded from the spool, but announcing it failed: {error}"))


_RECORD_FIELDS = ("error", "verdict", "received_at", "processed_at", "size_bytes", "mtime_ns", "settings", "reprocessed_from")


def _record_fields(fields: dict[str, Any]) -> dict[str, Any]:
    """The spooled fields `record_run` takes as keywords (sha256 and status go positionally)."""
    chosen = {key: fields[key] for key in _RECORD_FIELDS if key in fields}
    if "species" in fields and fields["species"] is not None:
        chosen["species"] = tuple(fields["species"])
    made_with = fields.get("provenance")
    if made_with is not None:
        chosen["provenance"] = Provenance(**made_with)
    return chosen


def _decoded(result_json: str | None) -> RunResult | None:
    if not result_json:
        return None
    try:
        return from_json(result_json)
    except ResultFormatError:
        return None


def station_ledger(location: str | Path, data_dir: Path, instrument: str, emit: Emit) -> FileLedger:
    """The station's ledger for a configured location: a server URL or the data folder."""
    if ledger.is_server_url(location):
        return ServerLedger(location, data_dir, instrument, emit)
    return FileLedger(location, data_dir, instrument, emit)

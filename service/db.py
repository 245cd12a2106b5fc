"""Storage models and sessions (SQLAlchemy). SQLite in WAL mode by default; any URL works.

Tables: circuits (by content hash), plans (by network key and memory class), results (the cache,
keyed by circuit content hash, bitstring and dtype) and jobs. These are storage models; the API's
pydantic schemas live in ``service/schemas.py``.
"""

from __future__ import annotations

import json
import time
from typing import Iterator

from sqlalchemy import Float, Integer, String, Text, create_engine, event, select
from sqlalchemy.engine import Engine
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import DeclarativeBase, Mapped, Session, mapped_column, sessionmaker

from contraction.errors import PlanError
from contraction.planning.plan import Plan
from contraction.planning.store import best_fitting, target_key


class Base(DeclarativeBase):
    """Declarative base of the storage models."""

    pass


class CircuitRow(Base):
    """A registered circuit: ids, sizes and its JSON document."""

    __tablename__ = "circuits"
    circuit_id: Mapped[str] = mapped_column("content_hash", String(64), primary_key=True)  # column name of schema v1
    architecture_id: Mapped[str] = mapped_column("structure_hash", String(64), index=True)  # column name of schema v1
    num_qubits: Mapped[int] = mapped_column(Integer)
    num_gates: Mapped[int] = mapped_column(Integer)
    document: Mapped[str] = mapped_column(Text)           # the JSON circuit document
    created: Mapped[float] = mapped_column(Float, default=time.time)


class PlanRow(Base):
    """A stored plan: network key, memory class, cost and the plan's JSON."""

    __tablename__ = "plans"
    network_key: Mapped[str] = mapped_column(String(64), primary_key=True)
    target: Mapped[str] = mapped_column(String(16), primary_key=True)
    madds: Mapped[float] = mapped_column(Float)
    plan_json: Mapped[str] = mapped_column(Text)
    updated: Mapped[float] = mapped_column(Float, default=time.time)


class ResultRow(Base):
    """A cached amplitude, by circuit id, bitstring and dtype, with the engine and plan that computed it."""

    __tablename__ = "results"
    circuit_id: Mapped[str] = mapped_column("circuit_hash", String(64), primary_key=True)  # column name of schema v1
    bitstring: Mapped[str] = mapped_column(String, primary_key=True)
    dtype: Mapped[str] = mapped_column(String(16), primary_key=True)
    re: Mapped[float] = mapped_column(Float)
    im: Mapped[float] = mapped_column(Float)
    engine: Mapped[str] = mapped_column(String(16))
    plan_hash: Mapped[str | None] = mapped_column(String(64), nullable=True)
    created: Mapped[float] = mapped_column(Float, default=time.time)


class JobRow(Base):
    """A job: its bitstrings, status, progress, owner and provenance (a row before it is queued)."""

    __tablename__ = "jobs"
    id: Mapped[str] = mapped_column(String(32), primary_key=True)
    status: Mapped[str] = mapped_column(String(16), index=True)
    circuit_id: Mapped[str] = mapped_column("circuit_hash", String(64))  # column name of schema v1
    dtype: Mapped[str] = mapped_column(String(16))
    engine: Mapped[str] = mapped_column(String(16))
    bitstrings: Mapped[str] = mapped_column(Text)         # JSON list, input order
    total: Mapped[int] = mapped_column(Integer)
    done: Mapped[int] = mapped_column(Integer, default=0)
    cancel_requested: Mapped[int] = mapped_column(Integer, default=0)
    error: Mapped[str | None] = mapped_column(Text, nullable=True)
    provenance: Mapped[str | None] = mapped_column(Text, nullable=True)
    created: Mapped[float] = mapped_column(Float, default=time.time)
    started: Mapped[float | None] = mapped_column(Float, nullable=True)
    finished: Mapped[float | None] = mapped_column(Float, nullable=True)
    # who created the job: a digest of the bearer token (None when the service runs without tokens)
    owner: Mapped[str | None] = mapped_column(String(64), nullable=True)
    # while running: "planning" (engine choice and plan search), then "contracting"; the prediction
    # made when contracting starts gives the ETA until progress is a better guide
    phase: Mapped[str | None] = mapped_column(String(16), nullable=True)
    predicted_seconds: Mapped[float | None] = mapped_column(Float, nullable=True)
    contracting_since: Mapped[float | None] = mapped_column(Float, nullable=True)
    # while a plan is searched: the search's progress as JSON (trials, best multiply-adds, seconds, budget)
    planning: Mapped[str | None] = mapped_column(Text, nullable=True)
    # while running: refreshed every few seconds by the process running it; a running job whose
    # heartbeat has stopped was left by a process that ended (resumed by the next server start)
    heartbeat: Mapped[float | None] = mapped_column(Float, nullable=True)

    def bitstring_list(self) -> list[str]:
        """The job's bitstrings in input order."""
        return json.loads(self.bitstrings)


class DatabaseError(Exception):
    """The database cannot be used safely (corrupt or truncated file); the service must not start."""


def check_sqlite_file(url: str) -> str | None:
    """Refuse a corrupt or truncated SQLite file before anything writes to it.

    Returns a note for the log ("new empty database" for a zero-byte file), or None. Raises
    :class:`DatabaseError` with the path when ``PRAGMA quick_check`` fails or the file is not a
    database; the file is never modified here."""
    import os
    import sqlite3

    if not url.startswith("sqlite:///") or url == "sqlite:///:memory:":
        return None
    path = url[len("sqlite:///"):]
    if not os.path.exists(path):
        return None
    wal = path + "-wal"
    if os.path.getsize(path) == 0:
        if os.path.exists(wal) and os.path.getsize(wal) > 0:
            raise DatabaseError(f"{path} is empty but its write-ahead log {wal} is not: the database was "
                                "truncated; restore it from a backup (it was left as it is)")
        return f"{path} is an empty file: starting a new database in it"
    try:
        conn = sqlite3.connect(f"file:{path}?mode=ro", uri=True, timeout=30)
        try:
            rows = conn.execute("PRAGMA quick_check").fetchall()
        finally:
            conn.close()
    except sqlite3.DatabaseError as exc:
        raise DatabaseError(f"{path} is not a usable SQLite database ({exc}); restore it from a backup "
                            "(it was left as it is)") from None
    if [r[0] for r in rows] != ["ok"]:
        raise DatabaseError(f"{path} fails its integrity check ({rows[0][0]}); restore it from a backup "
                            "(it was left as it is)")
    return None


def _migrate(engine: Engine) -> None:
    """Columns added after a table was first created (create_all does not add them)."""
    from sqlalchemy import inspect, text

    cols = {c["name"] for c in inspect(engine).get_columns("jobs")}
    added = {"owner": "VARCHAR(64)", "phase": "VARCHAR(16)", "predicted_seconds": "FLOAT",
             "contracting_since": "FLOAT", "planning": "TEXT",
             "heartbeat": "FLOAT"}
    for name, kind in added.items():
        if name not in cols:
            with engine.begin() as conn:
                conn.execute(text(f"ALTER TABLE jobs ADD COLUMN {name} {kind}"))


def make_engine(url: str) -> Engine:
    """An engine for ``url`` with the tables in place. Called by every job's worker process, so the
    integrity check (:func:`check_sqlite_file`) is not here but at start-up."""
    kwargs: dict = {}
    if url.startswith("sqlite"):
        kwargs["connect_args"] = {"check_same_thread": False, "timeout": 30}
    else:
        kwargs["pool_pre_ping"] = True          # survive a database restart between requests
    engine = create_engine(url, **kwargs)
    if url.startswith("sqlite"):
        @event.listens_for(engine, "connect")
        def _pragmas(conn, _record):
            cur = conn.cursor()
            cur.execute("PRAGMA journal_mode=WAL")
            cur.execute("PRAGMA synchronous=NORMAL")
            cur.execute("PRAGMA busy_timeout=30000")
            cur.close()
    Base.metadata.create_all(engine)
    _migrate(engine)
    return engine


def session_factory(engine: Engine) -> sessionmaker[Session]:
    """Sessions on ``engine`` whose objects stay readable after commit."""
    return sessionmaker(engine, expire_on_commit=False)


class SqlPlanStore:
    """The plan store as database rows (JSON text, checksummed, validated before use)."""

    def __init__(self, sessions: sessionmaker[Session]):
        self.sessions = sessions

    def _plans(self, s: Session, network_key: str) -> Iterator[Plan]:
        for row in s.scalars(select(PlanRow).where(PlanRow.network_key == network_key)):
            try:
                yield Plan.from_json(row.plan_json)
            except PlanError:
                s.delete(row)

    def get(self, network_key: str, max_peak_elements: float | None = None) -> Plan | None:
        """The cheapest stored plan for the key that fits ``max_peak_elements``, or None."""
        with self.sessions() as s:
            plans = list(self._plans(s, network_key))
            s.commit()
        return best_fitting(plans, max_peak_elements)

    def put(self, plan: Plan) -> bool:
        """Keep the plan unless its memory class already has one as cheap; whether it was kept."""
        with self.sessions() as s:
            row = s.get(PlanRow, (plan.network_key, target_key(plan)))
            if row is not None and row.madds <= plan.madds:
                return False
            if row is None:
                row = PlanRow(network_key=plan.network_key, target=target_key(plan))
                s.add(row)
            row.madds = plan.madds
            row.plan_json = plan.to_json()
            row.updated = time.time()
            try:
                s.commit()
            except IntegrityError:              # another replica stored a plan for this slot first
                s.rollback()
                return False
        return True

"""Results store: insert and export through the store's normal path vs raw sqlite3, and a trend query.

* ``store_insert``: 100,000 measurements as the runner's events (100 steps of 1,000), through
  ``Store.handle`` (one transaction per step, Core bulk insert).  Baseline: raw ``sqlite3``
  ``executemany`` of the same rows, pre-built as tuples, into the same schema with the same pragmas
  (WAL, synchronous FULL) and the same transactions (one per step, with its step row).
* ``store_export``: ``export_rows`` of those 100,000 rows (dicts in the fixed column order, ISO start
  times).  Baseline: raw ``sqlite3`` SELECT of the same columns, same join and order, ``fetchall``.
* ``store_trend``: ``quantity_series`` (one board, channel and output) on a database of
  ``BENCH_STORE_TREND_ROWS`` measurement rows (default 2,000,000; the goal is stated for 10 M),
  filled with raw sqlite3 for speed: 200 boards, weekly runs of 160 values.  Absolute goal < 1 s.

Each side is timed ``REPEATS`` times, alternating, on new files; the best of each is reported.
Events are built before the clock starts: building them is the engine's cost, not the store's.
"""

from __future__ import annotations

import os
import sqlite3
import tempfile
import time
from collections.abc import Callable
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

from sequencer.events import (
    Event,
    Measurement,
    MeasurementMade,
    RunFinished,
    RunInfo,
    StepFinished,
    StepStarted,
)
from sequencer.store import Store, export_rows

N_ROWS = 100_000
N_STEPS = 100
REPEATS = 3
GOAL_RATIO = 3.0
TREND_GOAL_S = 1.0
T0 = datetime(2025, 1, 6, 8, 0, tzinfo=UTC)
INFO = RunInfo(
    procedure="pa8-gain",
    procedure_version="1.2",
    procedure_text="steps: []\n",
    procedure_sha256="0" * 64,
    procedure_path="procedures/pa8-gain.yaml",
    bench="bench-2",
    board="NR-PA8-0001",
    board_type="PA8",
    operator="bench",
    software_version="0.1.0",
)
MEASUREMENT_COLUMNS = "run_id, step_id, quantity, value, uncertainty, unit, channel, output, aggressor, low, high, verdict"
EXPORT_SQL = (
    "SELECT r.id, r.started_at, r.procedure, r.procedure_version, r.procedure_sha256, r.bench,"
    " r.board, m.channel, m.output, m.aggressor, m.quantity, m.value, m.uncertainty, m.unit, m.low,"
    " m.high, m.verdict FROM measurements m JOIN runs r ON r.id = m.run_id ORDER BY m.run_id, m.id"
)


def _measurement(i: int) -> Measurement:
    return Measurement(
        "gain",
        1.0 + i * 1e-7,
        "V/V",
        0.002,
        i % 8 + 1,
        ("x1", "x5")[i % 2],
        None,
        0.95,
        1.05,
        "pass",
    )


def _events(run_id: int) -> list[list[Event]]:
    per = N_ROWS // N_STEPS
    steps = []
    for k in range(N_STEPS):
        path = f"scan/{k}"
        evs: list[Event] = [StepStarted(run_id, path, "scan", k, N_STEPS, T0)]
        evs += [MeasurementMade(run_id, path, _measurement(k * per + i)) for i in range(per)]
        evs.append(StepFinished(run_id, path, "scan", "completed", T0, T0))
        steps.append(evs)
    return steps


def _timed(fn: Callable[[], Any]) -> tuple[float, Any]:
    start = time.perf_counter()
    out = fn()
    return time.perf_counter() - start, out


def _row(
    name: str, ours: float, baseline: float | None, goal: str, met: bool, unit: str = "s"
) -> dict:
    ratio = None if baseline is None else ours / baseline
    return {"name": name, "ours": ours, "baseline": baseline, "unit": unit, "ratio": ratio, "goal": goal,
            "verdict": "met" if met else "short"}  # fmt: skip


def _raw(path: Path) -> sqlite3.Connection:
    con = sqlite3.connect(path, isolation_level=None)
    for pragma in ("journal_mode = WAL", "synchronous = FULL", "foreign_keys = ON"):
        con.execute(f"PRAGMA {pragma}")
    return con


def _raw_insert(con: sqlite3.Connection, run_id: int, steps: list[list[Event]]) -> None:
    tuples = [
        [(run_id, m.quantity, m.value, m.uncertainty, m.unit, m.channel, m.output, m.aggressor, m.low, m.high, m.verdict)
         for m in (e.measurement for e in evs if isinstance(e, MeasurementMade))]
        for evs in steps
    ]  # fmt: skip

    def insert() -> None:
        for k, rows in enumerate(tuples):
            con.execute("BEGIN IMMEDIATE")
            step_id = con.execute(
                "INSERT INTO steps (run_id, path, kind, position, status, started_at, finished_at,"
                " settings, results, error) VALUES (?, ?, 'scan', ?, 'completed', ?, ?, '{}', '{}', '')",
                (run_id, f"scan/{k}", k, "2025-01-06 08:00:00", "2025-01-06 08:00:00"),
            ).lastrowid
            con.executemany(
                f"INSERT INTO measurements ({MEASUREMENT_COLUMNS}) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                [(r[0], step_id, *r[1:]) for r in rows],
            )
            con.execute("COMMIT")

    return insert


def _ours_once(path: Path) -> tuple[float, float]:
    with Store.open(f"sqlite:///{path}") as store:
        run_id = store.create_run(INFO, T0)
        steps = _events(run_id)

        def record() -> None:
            for evs in steps:
                for e in evs:
                    store.handle(e)

        insert_s, _ = _timed(record)
        store.handle(RunFinished(run_id, "completed", T0 + timedelta(hours=1)))
        export_s, rows = _timed(lambda: export_rows(store))
    assert len(rows) == N_ROWS
    return insert_s, export_s


def _raw_once(path: Path) -> tuple[float, float]:
    with Store.open(f"sqlite:///{path}") as store:  # same schema, same indexes
        run_id = store.create_run(INFO, T0)
    con = _raw(path)
    insert_s, _ = _timed(_raw_insert(con, run_id, _events(run_id)))
    export_s, rows = _timed(lambda: con.execute(EXPORT_SQL).fetchall())
    con.close()
    assert len(rows) == N_ROWS
    return insert_s, export_s


def bench_insert_export(folder: Path) -> list[dict]:
    """Best of ``REPEATS`` for each side, alternating, each on a new database file."""
    ours, raw = [], []
    for k in range(REPEATS):
        ours.append(_ours_once(folder / f"ours{k}.db"))
        raw.append(_raw_once(folder / f"raw{k}.db"))
    (oi, oe), (bi, be) = [
        tuple(min(col) for col in zip(*side, strict=True)) for side in (ours, raw)
    ]
    goal = f"<= {GOAL_RATIO:g}x raw sqlite3"
    return [
        _row("store_insert", oi, bi, goal, oi <= GOAL_RATIO * bi),
        _row("store_export", oe, be, goal, oe <= GOAL_RATIO * be),
    ]


def _fill_trend_db(path: Path, n_rows: int) -> None:
    """200 boards, weekly runs, each 8 channels x 2 outputs x 10 quantities = 160 values."""
    with Store.open(f"sqlite:///{path}"):
        pass  # schema at head
    con = _raw(path)
    con.execute("PRAGMA synchronous = OFF")  # filling only; the timed query is read-only
    con.execute("INSERT INTO documents (sha256, text) VALUES ('d', 'steps: []')")
    per_run, boards = 160, 200
    n_runs = max(1, n_rows // per_run)
    quantities = ["gain", "offset_mV", "inl_pct", "noise_in_mV", "crosstalk_pct", "threshold_mV",
                  "threshold_sigma_mV", "peaking_time_ns", "rise_time_ns", "discriminator_offset_mV"]  # fmt: skip
    con.execute("BEGIN")
    for r in range(n_runs):
        board, week = r % boards, r // boards
        start = (T0 + timedelta(weeks=week, minutes=board)).replace(tzinfo=None).isoformat(" ")
        run_id = con.execute(
            "INSERT INTO runs (procedure, procedure_version, procedure_sha256, procedure_path,"
            " procedure_doc, bench, board, board_type, batch, operator, software_version, parameters,"
            " status, reason, started_at, ended_at, host, pid) VALUES ('pa8-gain', '1.2', 'x', 'p',"
            " 'd', 'bench-2', ?, 'PA8', 'NR-B07', 'bench', '0.1.0', '{}', 'running', '', ?, ?,"
            " 'h', 1)",
            (f"NR-PA8-{board:04d}", start, start),
        ).lastrowid
        step_id = con.execute(
            "INSERT INTO steps (run_id, path, kind, status, started_at, finished_at, settings,"
            " results, error) VALUES (?, 'all', 'scan', 'completed', ?, ?, '{}', '{}', '')",
            (run_id, start, start),
        ).lastrowid
        con.executemany(
            f"INSERT INTO measurements ({MEASUREMENT_COLUMNS}) VALUES (?, ?, ?, ?, ?, '', ?, ?, NULL, 0, 2, 'pass')",
            [(run_id, step_id, q, 1.0 + 1e-4 * week, 0.002, ch, out)
             for q in quantities for ch in range(1, 9) for out in ("x1", "x5")],
        )  # fmt: skip
        con.execute("UPDATE runs SET status = 'completed' WHERE id = ?", (run_id,))  # steps first
        if r % 2000 == 1999:
            con.execute("COMMIT")
            con.execute("BEGIN")
    con.execute("COMMIT")
    con.execute("ANALYZE")
    con.close()


def bench_trend(folder: Path) -> list[dict]:
    n_rows = int(os.environ.get("BENCH_STORE_TREND_ROWS", "2000000"))
    path = folder / "trend.db"
    _fill_trend_db(path, n_rows)
    with Store.open(f"sqlite:///{path}") as store:
        first, series = _timed(
            lambda: store.quantity_series("NR-PA8-0042", "gain", channel=3, output="x5")
        )
        repeats = [
            _timed(lambda: store.quantity_series("NR-PA8-0137", "noise_in_mV", channel=8))[0]
            for _ in range(5)
        ]
    assert series and all(p.channel == 3 and p.output == "x5" for p in series)
    worst = max(first, *repeats)
    return [_row(f"store_trend ({n_rows:,} rows, {len(series)} points)", worst, None,
                 f"< {TREND_GOAL_S:g} s (stated for 10 M rows)", worst < TREND_GOAL_S)]  # fmt: skip


def run() -> list[dict]:
    with tempfile.TemporaryDirectory(prefix="bench_store_") as tmp:
        folder = Path(tmp)
        return bench_insert_export(folder) + bench_trend(folder)

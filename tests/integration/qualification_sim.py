"""Shared pieces of the qualification tests: simulated boards whose truth is known, small board
types, and one helper that runs a shipped procedure end to end (real TCP sockets to the simulator,
real SQLite store) and hands back the stored measurements."""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import yaml

from sequencer import compose
from sequencer.errors import RunAborted
from sequencer.procedure import BoardInfo, build_plan, load_board_type, load_procedure
from sequencer.store import Store

ROOT = Path(__file__).resolve().parents[2]
PROCEDURES = ROOT / "procedures"
DEMO = ROOT / "sequencer" / "demo"

HEALTHY = {
    "gain_x1": 1.0,
    "gain_x5": 5.0,
    "baseline_mV": 0.1,
    "noise_in_mV": 0.3,
    "saturation_mV": 1500,
    "discriminator_offset_mV": 1.5,
    "dead": False,
}


def channel(**changes: Any) -> dict[str, Any]:
    """A healthy channel of the simulated board file, with ``changes``."""
    return {**HEALTHY, **changes}


def write_board(
    folder: Path, serial: str, channels: Sequence[Mapping[str, Any]], **board: Any
) -> Path:
    """A simulated board file (DESIGN.md keys) at ``folder/<serial>.yaml``."""
    data = {
        "serial": serial,
        "board_type": "PA8",
        "outputs": {"x1": 1.0, "x5": 5.0},
        "shaper": {"order": 4, "tau_ns": 50, "kind": "unipolar"},
        "pulse": {"rise_ns": 4.0, "decay_ns": 40.0},
        "crosstalk_pct": 0.5,
        "bias_resistance_Mohm": 5000,
        "seed": 11,
        "faults": [],
        **board,
        "channels": [dict(c) for c in channels],
    }
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / f"{serial}.yaml"
    path.write_text(yaml.safe_dump(data, sort_keys=False))
    return path


def small_board(serial: str, channels: int) -> BoardInfo:
    """The PA8 board type cut to ``channels`` channels (same outputs and nominal gains)."""
    return dataclasses.replace(load_board_type("PA8"), serial=serial, channels=channels)


@dataclasses.dataclass(frozen=True)
class Finished:
    """A finished run: its id, outcome, measurements and the store's URL."""

    run_id: int
    failed: int
    measurements: list[Any]
    db_url: str

    def values(self, quantity: str) -> dict[tuple[Any, ...], Any]:
        """``(channel, output, aggressor) -> measurement`` of one quantity."""
        return {
            (m.channel, m.output, m.aggressor): m
            for m in self.measurements
            if m.quantity == quantity
        }


def run_shipped(
    name: str,
    board_file: Path,
    db: Path,
    *,
    channels: int,
    overrides: Mapping[str, Any] | None = None,
) -> Finished:
    """Run ``procedures/<name>.yaml`` on a simulated bench playing ``board_file``."""
    serial = yaml.safe_load(board_file.read_text())["serial"]
    procedure = load_procedure(PROCEDURES / f"{name}.yaml")
    plan = build_plan(procedure, small_board(serial, channels), overrides=overrides)
    url = f"sqlite:///{db}"
    request = compose.RunRequest(
        operator="test",
        unattended=True,
        progress=False,
        handle_signals=False,
    )
    with Store.open(url) as store:
        with compose.bench_for(None, str(board_file)) as spec:
            result = compose.execute(plan, spec, store, request)
        ms = store.measurements(run_id=result.run_id)
    return Finished(result.run_id, result.outcome.failed, ms, url)


__all__ = [
    "DEMO",
    "HEALTHY",
    "PROCEDURES",
    "ROOT",
    "Finished",
    "RunAborted",
    "channel",
    "run_shipped",
    "small_board",
    "write_board",
]

"""Adaptive scans: ``python -m tests.benchmarks --only adaptive``.

Both runs play procedures/qualify-preamp.yaml on drivers/sim/boards/example-pa8.yaml in the same
process; instrument time is what the bench's clock accounted for the waits the statistics demand
(acquisitions, gates, settles, ramps; drivers/sim/clock.py), not wall time.  ``ADAPTIVE`` (the
shipped defaults), ``OPTIONS`` (added to them) and ``FIXED`` are the three sets of parameters:

* ``adaptive_scans``: the whole qualification as shipped (adaptive S-curves to 0.015 mV) against
  the fixed grids (29 thresholds x 500 pulses; 256 averages a point; two noise records of 2000
  points).  Goal: ratio <= 0.5.  The row also says whether both runs gave the same verdict for
  every value and the same values within 3 combined standard uncertainties where the options change
  them (the others come from identical steps; the bias current differs only by the meter's draws,
  whose number follows the machine's load).
* ``adaptive_amplitude``: the acquisition time of the linearity fragments alone in a third run,
  the shipped procedure with its amplitude-scan and noise options on (``OPTIONS``; both off in the
  shipped procedure, qualify-preamp.yaml says why), with the median ratio of the gain's and the
  INL's uncertainties (adaptive / fixed) in the unit column: "the same uncertainty" means that
  ratio is about 1 or below.
* ``adaptive_noise``: the same for the noise fragments (the DC-level capture and the noise
  records) of the third run, with the median ratio of noise_in_mV's uncertainties.
The per-part clocks (round trips and transfers too) are printed below the table.
"""

from __future__ import annotations

import math
import statistics
import sys
import tempfile
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from drivers.bench import bench_from_mapping, open_bench
from drivers.sim import start_sim_bench
from sequencer.compose import plan_for
from sequencer.engine import Runner, RunOptions, describe_run
from sequencer.events import StepFinished, StepStarted
from sequencer.procedure import load_procedure
from sequencer.store import Store

ROOT = Path(__file__).resolve().parents[2]
BOARD = ROOT / "drivers" / "sim" / "boards" / "example-pa8.yaml"
PROCEDURE = ROOT / "procedures" / "qualify-preamp.yaml"
GOAL = 0.5


#: The runs' parameters: the shipped adaptive defaults, the amplitude and noise options on top,
#: and the fixed grids they replace.
ADAPTIVE: dict[str, Any] = {}
OPTIONS: dict[str, Any] = {"averages": 64, "linearity_target": "0.02 mV", "min_captures": 2,
                           "max_captures": 4, "noise_target": "1.9 %", "noise_points": 5000}  # fmt: skip
FIXED: dict[str, Any] = {"adaptive": False, "averages": 256, "linearity_target": "0 mV",
                         "noise_target": "0 %", "noise_points": 2000, "noise_captures": 2}  # fmt: skip
PARTS = ("linearity", "noise", "threshold")


def _part(path: str) -> str:
    found = [p for p in PARTS if f"/{p}/" in f"/{path}/"]
    return found[0] if found else "other"


class PartClock:
    """A run subscriber: the bench clock's seconds by kind, attributed to the fragment each step
    belongs to (linearity, noise, threshold, other) by the clock read at its start and end."""

    def __init__(self, pace: Any) -> None:
        self.pace = pace
        self.parts: dict[str, dict[str, float]] = {}
        self._at: dict[str, float] = {}

    def __call__(self, event: Any) -> None:
        if isinstance(event, StepStarted):
            self._at = self.pace.breakdown()
        elif isinstance(event, StepFinished) and self._at:
            now = self.pace.breakdown()
            part = self.parts.setdefault(_part(event.path), {})
            for kind, seconds in now.items():
                part[kind] = part.get(kind, 0.0) + seconds - self._at.get(kind, 0.0)
            self._at = {}


def qualify(folder: Path, overrides: dict[str, Any], name: str) -> dict[str, Any]:
    plan = plan_for(load_procedure(PROCEDURE), "NR-PA8-0001", overrides=overrides)
    with (
        Store.open(f"sqlite:///{folder}/{name}.db") as store,
        start_sim_bench(BOARD) as sim,
        open_bench(bench_from_mapping(sim.bench_mapping(), source="<bench>")) as bench,
    ):
        info = describe_run(plan, bench, operator="bench")
        run_id = store.create_run(info, started_at=datetime.now(UTC))
        parts = PartClock(sim.pace)
        runner = Runner(plan, bench, run_id=run_id, subscribers=[store.subscriber, parts],
                        options=RunOptions(unattended=True, handle_signals=False), info=info)  # fmt: skip
        runner.run()
        values = {
            (m.quantity, m.channel, m.output, m.aggressor): m
            for m in store.measurements(run_id=run_id)
        }
        return {"demanded": sim.pace.demanded_s(), "clock": sim.pace.breakdown(),
                "values": values, "parts": parts.parts}  # fmt: skip


#: The values the options change: compared within 3 combined standard uncertainties.
CHANGED = ("threshold_mV", "threshold_sigma_mV", "discriminator_offset_mV", "gain", "offset_mV",
           "inl_pct", "noise_in_mV")  # fmt: skip


def _agree(a: Any, b: Any) -> bool:
    if b is None or a.verdict != b.verdict:
        return False
    if a.quantity not in CHANGED or a.value == b.value:
        return True
    if not (a.measured and b.measured):
        return False
    u = math.hypot(a.uncertainty or 0.0, b.uncertainty or 0.0)
    return abs(a.value - b.value) <= 3 * u


def _differ(fixed: dict, adaptive: dict) -> list:
    return [k for k in fixed["values"] if not _agree(fixed["values"][k], adaptive["values"].get(k))]


def _same_values(fixed: dict, adaptive: dict) -> bool:
    return not _differ(fixed, adaptive) and fixed["values"].keys() == adaptive["values"].keys()


def _uncertainty_ratio(fixed: dict, adaptive: dict, quantities: tuple[str, ...]) -> float:
    """Median of adaptive / fixed standard uncertainty over the values of ``quantities``."""
    ratios = [
        adaptive[k].uncertainty / m.uncertainty
        for k, m in fixed.items()
        if k[0] in quantities and k in adaptive and m.uncertainty and adaptive[k].uncertainty
    ]
    return statistics.median(ratios) if ratios else math.nan


def _part_row(name: str, part: str, fixed: dict, adaptive: dict, quantities: tuple[str, ...],
              same: bool) -> dict:  # fmt: skip
    ours = adaptive["parts"].get(part, {}).get("acquisition", 0.0)
    base = fixed["parts"].get(part, {}).get("acquisition", 0.0)
    u = _uncertainty_ratio(fixed["values"], adaptive["values"], quantities)
    ratio = ours / base if base else math.nan
    return {
        "name": name,
        "ours": ours,
        "baseline": base,
        "unit": f"s of acquisitions; uncertainty {u:.2f}x",
        "ratio": ratio,
        "goal": f"<= {GOAL:g} at uncertainty <= ~1x",
        "verdict": "met" if ratio <= GOAL and u <= 1.05 and same else "short",
    }


def run() -> list[dict]:
    with tempfile.TemporaryDirectory() as tmp:
        fixed = qualify(Path(tmp), FIXED, "fixed")
        adaptive = qualify(Path(tmp), ADAPTIVE, "adaptive")
        options = qualify(Path(tmp), {**ADAPTIVE, **OPTIONS}, "options")
    differ = _differ(fixed, adaptive)
    same = not differ and fixed["values"].keys() == adaptive["values"].keys()
    agree = _same_values(fixed, options)
    print(f"  with the amplitude and noise options: same values and verdicts: {agree}",
          file=sys.stderr)  # fmt: skip
    ratio = adaptive["demanded"] / fixed["demanded"]
    print(f"adaptive_scans: {adaptive['demanded']:.1f} s of instrument time against "
          f"{fixed['demanded']:.1f} s; same values and verdicts: {same}", file=sys.stderr)  # fmt: skip
    for kind in fixed["clock"]:
        print(f"  {kind:12s} {adaptive['clock'][kind]:7.2f} s vs {fixed['clock'][kind]:7.2f} s",
              file=sys.stderr)  # fmt: skip
    for part in (*PARTS, "other"):
        run = options if part in ("linearity", "noise") else adaptive
        a, f = run["parts"].get(part, {}), fixed["parts"].get(part, {})
        print(f"  {part:10s} " + ", ".join(
            f"{kind} {a.get(kind, 0.0):.3f} vs {f.get(kind, 0.0):.3f} s" for kind in f if f[kind]
        ) + (" (option on)" if run is options else ""), file=sys.stderr)  # fmt: skip
    for key in differ[:10]:
        f, a = fixed["values"][key], adaptive["values"].get(key)
        print(f"  differs: {key}: {f.value} ({f.verdict}) vs {a and a.value} ({a and a.verdict})",
              file=sys.stderr)  # fmt: skip
    return [
        {
            "name": "adaptive_scans",
            "ours": adaptive["demanded"],
            "baseline": fixed["demanded"],
            "unit": "s of instrument time per board",
            "ratio": ratio,
            "goal": f"<= {GOAL:g} (same values and verdicts)",
            "verdict": "met" if ratio <= GOAL and same else "short",
        },
        _part_row("adaptive_amplitude", "linearity", fixed, options, ("gain", "inl_pct"), agree),
        _part_row("adaptive_noise", "noise", fixed, options, ("noise_in_mV",), agree),
    ]

"""The ``RunInfo`` of a run, from the plan, the bench and the operator."""

from __future__ import annotations

from typing import Any

from sequencer import __version__
from sequencer.events import InstrumentInfo, RunInfo
from sequencer.procedure.plan_model import Plan


def describe_run(
    plan: Plan,
    bench: Any,
    *,
    operator: str = "",
    identities: bool = True,
    batch: str = "",
    repeat_of: int | None = None,
) -> RunInfo:
    """Provenance known before the first step; ``identities`` reads ``*IDN?`` of each instrument."""
    ids = bench.identities() if identities else {}
    instruments = []
    for role, spec in bench.spec.instruments.items():
        ident = ids.get(role)
        due = getattr(spec, "calibration_due", None)
        calibrated = getattr(spec, "calibrated", None)
        instruments.append(
            InstrumentInfo(
                role=role,
                address=spec.address,
                maker=getattr(ident, "maker", ""),
                model=getattr(ident, "model", ""),
                serial=getattr(ident, "serial", ""),
                firmware=getattr(ident, "firmware", ""),
                calibration_due="" if due is None else str(due),
                calibrated="" if calibrated is None else str(calibrated),
            )
        )
    return RunInfo(
        procedure=plan.meta.name,
        procedure_version=plan.meta.version,
        procedure_text=plan.source_text,
        procedure_sha256=plan.sha256,
        procedure_path=plan.source_path,
        bench=bench.spec.name,
        board=plan.board.serial,
        board_type=plan.board.board_type,
        operator=operator,
        software_version=__version__,
        instruments=tuple(instruments),
        parameters=dict(plan.parameters),
        batch=batch,
        repeat_of=repeat_of,
        inputs=plan.inputs,
    )

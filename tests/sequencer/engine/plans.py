"""Hand-built plans and synthetic traces for the engine tests (constructors only)."""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from typing import Any

import numpy as np

from drivers.trace import Trace
from sequencer.procedure.plan_model import BoardInfo, Limit, Plan, PlannedStep, ProcedureMeta


def step(
    path: str,
    kind: str,
    block: str = "main",
    labels: Mapping[str, Any] | None = None,
    estimate_s: float = 0.0,
    **args: Any,
) -> PlannedStep:
    return PlannedStep(
        path=path,
        kind=kind,
        args=args,
        labels=dict(labels or {}),
        block=block,
        estimate_s=estimate_s,
    )


def plan(
    steps: Iterable[PlannedStep],
    *,
    limits: Iterable[Limit] = (),
    hazards: tuple[str, ...] = (),
    max_bias_volts: float = 0.0,
    channels: int = 4,
) -> Plan:
    return Plan(
        meta=ProcedureMeta(
            name="engine-test", version="1", hazards=hazards, max_bias_volts=max_bias_volts
        ),
        board=BoardInfo(serial="NR-PA8-0001", board_type="PA8", channels=channels),
        steps=tuple(steps),
        limits=tuple(limits),
        source_text="steps: []\n",
        sha256="0" * 64,
    )


def cr_rc(t_ns: np.ndarray, tau_ns: float, order: int) -> np.ndarray:
    """Unipolar CR-RC^n response to a step, x^n e^-x / n! (Spieler 2005 ch. 4; REFERENCES.md)."""
    x = np.clip(t_ns / tau_ns, 0.0, None)
    return x**order * np.exp(-x) / math.factorial(order)


def pulse_trace(
    height_mV: float,
    *,
    tau_ns: float = 50.0,
    order: int = 4,
    dt_ns: float = 1.0,
    points: int = 1200,
    pretrigger_ns: float = 200.0,
    baseline_mV: float = 0.0,
    noise_mV: float = 0.0,
    rng: np.random.Generator | None = None,
) -> Trace:
    """A positive CR-RC^n pulse of ``height_mV`` starting at the trigger instant t = 0."""
    t = -pretrigger_ns + dt_ns * np.arange(points)
    shape = cr_rc(t, tau_ns, order)
    shape /= shape.max()
    mv = baseline_mV + height_mV * shape
    if noise_mV:
        mv = mv + (rng or np.random.default_rng(1)).normal(0.0, noise_mV, points)
    return Trace(volts=mv * 1e-3, dt_s=dt_ns * 1e-9, t0_s=-pretrigger_ns * 1e-9, source="CHAN1")

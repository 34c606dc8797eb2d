"""Helpers of the simulator tests: board specs, a fake clock, pyvisa-py sessions, captures."""

from __future__ import annotations

import copy
import socket
from typing import Any

import numpy as np
import pyvisa

from drivers.sim import BoardSpec, SimBench, board_from_mapping

BASE_BOARD: dict[str, Any] = {
    "serial": "NR-PA8-9001",
    "outputs": {"x1": 1.0, "x5": 5.0},
    "shaper": {"order": 4, "tau_ns": 50, "kind": "unipolar"},
    "crosstalk_pct": 1.0,
    "bias_resistance_Mohm": 5000,
    "seed": 7,
    "faults": [],
    "channels": [
        {
            "gain_x1": 1.01,
            "gain_x5": 5.04,
            "baseline_mV": 0.2,
            "noise_in_mV": 0.30,
            "saturation_mV": 1500,
            "discriminator_offset_mV": 1.5,
            "dead": False,
        },
        {
            "gain_x1": 0.98,
            "gain_x5": 4.95,
            "baseline_mV": -0.3,
            "noise_in_mV": 0.25,
            "saturation_mV": 1400,
            "discriminator_offset_mV": 2.0,
            "dead": False,
        },
        {
            "gain_x1": 1.03,
            "gain_x5": 5.10,
            "baseline_mV": 0.5,
            "noise_in_mV": 0.35,
            "saturation_mV": 1600,
            "discriminator_offset_mV": 1.0,
            "dead": False,
        },
        {
            "gain_x1": 1.00,
            "gain_x5": 5.00,
            "baseline_mV": 0.0,
            "noise_in_mV": 0.30,
            "saturation_mV": 1500,
            "discriminator_offset_mV": 1.5,
            "dead": True,
        },
    ],
}


def make_board(**top: Any) -> BoardSpec:
    """BASE_BOARD with top-level keys replaced."""
    data = copy.deepcopy(BASE_BOARD)
    data.update(top)
    return board_from_mapping(data, source="<test board>")


class FakeClock:
    """A clock the test advances by hand (seconds)."""

    def __init__(self) -> None:
        self.now = 1000.0

    def __call__(self) -> float:
        return self.now

    def advance(self, seconds: float) -> None:
        self.now += seconds


def open_role(
    rm: pyvisa.ResourceManager, bench: SimBench, role: str, timeout_ms: int = 3000
) -> Any:
    """A pyvisa-py SOCKET session to ``role`` with newline terminations."""
    inst = rm.open_resource(bench.address(role), read_termination="\n", write_termination="\n")
    inst.timeout = timeout_ms
    # as the project's transport does: no Nagle delay on small back-to-back writes
    inst.visalib.sessions[inst.session].interface.setsockopt(
        socket.IPPROTO_TCP, socket.TCP_NODELAY, 1
    )
    return inst


class Sessions:
    """One pyvisa session per role of a running bench (closed by :meth:`close`)."""

    def __init__(self, rm: pyvisa.ResourceManager, bench: SimBench) -> None:
        self.bench = bench
        self._open = {role: open_role(rm, bench, role) for role in bench.ports}

    def __getattr__(self, role: str) -> Any:
        try:
            return self._open[role]
        except KeyError:
            raise AttributeError(role) from None

    def close(self) -> None:
        for inst in self._open.values():
            inst.close()


def fetch(scope: Any, scope_input: int) -> tuple[np.ndarray, np.ndarray]:
    """(t_ns, mV) of one input of the last acquisition, calibrated from TRACe:PREamble?."""
    dx, x0, dy, y0, points, _ = (
        float(v) for v in scope.query(f"TRAC:PRE? CHAN{scope_input}").split(",")
    )
    codes = scope.query_binary_values(
        f"TRAC:DATA? CHAN{scope_input}", datatype="h", is_big_endian=True, container=np.array
    )
    assert len(codes) == int(points)
    t_ns = (x0 + dx * np.arange(len(codes))) * 1e9
    return t_ns, (codes * dy + y0) * 1e3


def peak(t_ns: np.ndarray, v: np.ndarray) -> tuple[float, float]:
    """Time and value of the maximum, refined by a parabola through the three top samples."""
    i = int(np.argmax(v))
    if 0 < i < len(v) - 1:
        a, b, c = v[i - 1], v[i], v[i + 1]
        denom = a - 2 * b + c
        shift = 0.5 * (a - c) / denom if denom else 0.0
        return float(t_ns[i] + shift * (t_ns[1] - t_ns[0])), float(b - 0.25 * (a - c) * shift)
    return float(t_ns[i]), float(v[i])


def no_errors(inst: Any) -> None:
    """Assert the instrument's error queue is empty."""
    assert inst.query("SYST:ERR?") == '0,"No error"'

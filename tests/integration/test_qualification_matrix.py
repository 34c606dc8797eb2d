"""Issue 15's test matrix: the full qualification (procedures/qualify-preamp.yaml) of simulated
4-channel boards of either polarity, with DC levels of ±12 mV (per output and per channel), cable
delays of 0-30 ns, 1.2 mV of input noise, unipolar and bipolar shapers, a dead and a saturating
channel.  Every value is compared with the truth of the board file, and every verdict with the one
the board type's limit file implies from that truth; what cannot be measured is NaN with a reason
stored beside it.

Truth (DESIGN.md physics of the simulator, drivers/sim/response.py): gain, offset and INL from the
reference least-squares line (numpy.polyfit) through the heights ``±S·tanh(g·A/S)`` at the scan's
amplitudes; noise ``noise_in_mV``; DC level ``output_baseline_mV`` else ``baseline_mV``; rise 4 ns
(the board file's 10-90 %); S-curve width ``noise_in_mV · gain_x1`` (drivers/sim/counter.py);
discriminator offset as given; crosstalk ``crosstalk_pct`` between neighbours (0 beside a dead
channel); leakage V/R at the 30 V test voltage.  Shaper peak from the onset (Spieler 2005 ch. 4,
REFERENCES.md): CR-RCⁿ at n·τ, CR²-RCⁿ at (n+1-√(n+1))·τ.

Tolerances are the qualification issue's: gain 1 %, noise 20 %, crosstalk 0.25 pp, offset and
baseline 0.5 mV, peaking and rise 5 %, discriminator offset 0.5 mV.  Not in the issue, our choice:
S-curve width 20 % (as noise); INL 0.1 percentage point on channels whose noise is within its
limit (issue 15 asked that a healthy channel's INL be dominated by the transfer curve; it reported
noise inflating a true 0.09 % to 0.15-0.25 %); on every live channel the stated k = 2 interval
holds the true INL.  On the 1.2 mV channel the x5 INL reads 0.22-0.23 % against a true 0.09 %: the
largest |residual| of 8 points is biased upward by noise, which its uncertainty now carries
(sequencer.analysis.lines.inl_with_uncertainty, noise floor); there the value is not held to
0.1 pp; leakage 5 % (as tests/integration/test_qualification_full.py).  The input-referred noise divides by
the gain measured on the scan: on the saturating channel that is the compressed slope (0.87 instead
of 1.0), so it reads ~15 % high, inside the 20 % tolerance.
"""

from __future__ import annotations

import dataclasses
import math
from typing import Any

import numpy as np
import pytest
import yaml

from sequencer import compose
from sequencer.procedure import build_plan, load_procedure
from sequencer.procedure.board_choice import choose_board
from sequencer.store import Store
from tests.integration.qualification_sim import PROCEDURES, channel, write_board

TAU_NS, RISE_NS, CROSSTALK_PCT, R_MOHM, BIAS_V = 50.0, 4.0, 0.5, 5000.0, 30.0
TOP_MV, POINTS = 160.0, 8  # qualify-preamp.yaml's linearity scan (outputs up to 160 mV)
NOMINAL = {"x1": 1.0, "x5": 5.0}
CHANNELS = [
    # healthy, its outputs at different DC levels inside the ±10 mV limit
    channel(output_baseline_mV={"x1": -9.0, "x5": 9.0}),
    # noisy (1.2 mV) and DC levels of ±12 mV: fails noise and the DC fault on both outputs
    channel(noise_in_mV=1.2, gain_x1=1.02, gain_x5=5.1, output_baseline_mV={"x1": 12.0, "x5": -12.0}),
    channel(baseline_mV=-12.0, dead=True),
    channel(saturation_mV=250.0),
]
DEAD = 3
NOISE_LIMIT = 0.6  # mV, procedures/limits/PA8.yaml and PA8N.yaml


@dataclasses.dataclass(frozen=True)
class Case:
    board_type: str
    delay_ns: float
    order: int
    kind: str

    @property
    def sign(self) -> int:
        return -1 if self.board_type == "PA8N" else 1

    def peaking_ns(self) -> float:
        n = self.order
        return (n if self.kind == "unipolar" else n + 1 - math.sqrt(n + 1)) * TAU_NS


CASES = [
    pytest.param(Case("PA8", 0.0, 4, "unipolar"), id="positive-0ns-unipolar4"),
    pytest.param(Case("PA8N", 12.0, 2, "bipolar"), id="negative-12ns-bipolar2",
                 marks=pytest.mark.slow),
    pytest.param(Case("PA8", 30.0, 1, "unipolar"), id="positive-30ns-unipolar1",
                 marks=pytest.mark.slow),
    pytest.param(Case("PA8N", 20.0, 3, "unipolar"), id="negative-20ns-unipolar3",
                 marks=pytest.mark.slow),
]  # fmt: skip


def _qualify(folder, case: Case) -> list[Any]:
    serial = f"NR-{case.board_type}-T95{case.order}"
    polarity = (
        {"polarity": "negative", "output_polarity": {"shaped": "negative"}} if case.sign < 0 else {}
    )
    board = write_board(
        folder, serial, CHANNELS, pulse_delay_ns=case.delay_ns, crosstalk_pct=CROSSTALK_PCT,
        shaper={"order": case.order, "tau_ns": TAU_NS, "kind": case.kind},
        bias_resistance_Mohm=R_MOHM, **polarity,
    )  # fmt: skip
    procedure, info, board_in = choose_board(
        load_procedure(PROCEDURES / "qualify-preamp.yaml"), serial, case.board_type
    )
    plan = build_plan(
        procedure, dataclasses.replace(info, channels=len(CHANNELS)),
        overrides={"bias_volts": f"{BIAS_V:g} V"}, board_input=board_in,
    )  # fmt: skip
    request = compose.RunRequest(
        operator="test", unattended=True, progress=False, handle_signals=False
    )
    with Store.open(f"sqlite:///{folder / 'r.db'}") as store:
        with compose.bench_for(None, str(board)) as spec:
            result = compose.execute(plan, spec, store, request)
        return store.measurements(run_id=result.run_id)


def _transfer(sign: int, gain: float, saturation: float) -> tuple[float, float, float]:
    """(gain, offset mV, INL %) of the reference least-squares line through the true heights."""
    amps = np.linspace(TOP_MV / POINTS / gain, TOP_MV / gain, POINTS)
    heights = sign * saturation * np.tanh(gain * amps / saturation)
    slope, intercept = np.polyfit(amps, heights, 1)
    resid = heights - (slope * amps + intercept)
    return slope, intercept, 100.0 * np.max(np.abs(resid)) / (abs(slope) * np.ptp(amps))


def _truth(case: Case, m: Any) -> tuple[float | None, float | None, float | None]:
    """(true value or None when not measurable, relative tolerance, absolute tolerance)."""
    q, out = m.quantity, m.output
    if q == "leakage_nA":
        return BIAS_V / R_MOHM * 1e3, 0.05, None
    spec = CHANNELS[m.channel - 1]
    if q == "baseline_mV":
        return spec.get("output_baseline_mV", {}).get(out, spec["baseline_mV"]), None, 0.5
    if q == "crosstalk_pct":
        live = DEAD not in (m.channel, m.aggressor)
        return (CROSSTALK_PCT if live and abs(m.channel - m.aggressor) == 1 else 0.0), None, 0.25
    if spec["dead"]:
        return None, None, None
    if q in ("gain", "offset_mV", "inl_pct"):
        gain, offset, inl = _transfer(case.sign, spec[f"gain_{out}"], spec["saturation_mV"])
        return {"gain": (gain, 0.01, None), "offset_mV": (offset, None, 0.5),
                "inl_pct": (inl, None, 0.1)}[q]  # fmt: skip
    table = {
        "noise_in_mV": (spec["noise_in_mV"], 0.2, None),
        "rise_time_ns": (RISE_NS, 0.05, None),
        "peaking_time_ns": (case.peaking_ns(), 0.05, None),
        "threshold_sigma_mV": (spec["noise_in_mV"] * spec["gain_x1"], 0.2, None),
        "discriminator_offset_mV": (spec["discriminator_offset_mV"], None, 0.5),
    }
    return table.get(q, (math.nan, None, None))  # nan: a value with no stated truth


def _expected_verdict(limits: list[dict], m: Any, truth: float | None) -> str:
    """The verdict the limit file implies for the true value: inclusive bounds (the file's
    header), per output where the limit names one.  What cannot be measured fails, limited or not
    (README "Quantities": NaN with verdict fail, never a plausible number)."""
    if truth is None:
        return "fail"
    found = [lim for lim in limits
             if lim["quantity"] == m.quantity and lim.get("output") in (None, m.output)]  # fmt: skip
    if not found:
        return "info"
    (lim,) = found
    inside = lim.get("low", -math.inf) <= truth <= lim.get("high", math.inf)
    return "pass" if inside else "fail"


@pytest.mark.parametrize("case", CASES)
def test_every_value_and_verdict_follows_from_the_truth(tmp_path, case: Case):
    limits = yaml.safe_load((PROCEDURES / "limits" / f"{case.board_type}.yaml").read_text())
    ms = _qualify(tmp_path, case)
    assert len(ms) > 60  # 4 channels x 16 quantities, crosstalk and leakage
    checked = 0
    for m in ms:
        truth, rel, abs_ = _truth(case, m)
        where = (m.quantity, m.channel, m.output, m.aggressor)
        if truth is None:  # refused with its reason, never a plausible number
            assert not m.measured and m.reason and m.verdict == "fail", where
        elif not math.isnan(truth):
            if m.quantity == "inl_pct":  # the k = 2 interval holds the truth, noisy or not
                assert abs(m.value - truth) <= 2.0 * m.uncertainty, (where, m.uncertainty)
            if m.quantity != "inl_pct" or CHANNELS[m.channel - 1]["noise_in_mV"] <= NOISE_LIMIT:
                assert m.value == pytest.approx(truth, rel=rel, abs=abs_), where
            assert m.reason == "", where
            checked += 1
        assert m.verdict == _expected_verdict(limits["limits"], m, truth), where
    assert checked > 50
    # the dead channel fails for the reason a lab reads: no pulse, never "wrong polarity"
    dead = {m.reason for m in ms if m.channel == DEAD and not m.measured}
    assert any("no pulse above 5 σ of the baseline noise" in r for r in dead), dead
    assert not any("polarity" in m.reason for m in ms)

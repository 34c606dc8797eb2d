"""Analysis step handlers: selection by name and labels, figures against outside references."""

from __future__ import annotations

import math
from dataclasses import replace
from datetime import UTC, datetime

import numpy as np
import pytest
from scipy import stats

from drivers.trace import Trace
from sequencer.engine.context import Reading, RunContext, StopFlag
from sequencer.engine.records import RunOptions
from sequencer.engine.steps import handler_table
from sequencer.engine.steps.analysis import AnalysisInputError, failed_analysis
from sequencer.events import Measurement
from sequencer.procedure.kinds import KINDS
from sequencer.procedure.plan_model import Limit

from .plans import plan, pulse_trace, step

HANDLERS = handler_table()


def named(*, name: str, trace, labels) -> Trace:
    """A captured trace as the scope step gives it: with the procedure's name and its step's labels."""
    return replace(trace, name=name, labels=labels)


def make_ctx(limits=()) -> RunContext:
    return RunContext(
        plan=plan([], limits=limits),
        bench=None,
        run_id=1,
        emit=lambda e: None,
        options=RunOptions(),
        clock=lambda: datetime(2026, 1, 1, tzinfo=UTC),
        stop=StopFlag(),
    )


def test_table_covers_every_kind():
    assert set(HANDLERS) == set(KINDS)


def test_transfer_selects_scope_and_matches_numpy_polyfit():
    ctx = make_ctx(
        limits=[Limit("gain", 4.8, 5.2, "V/V", output="x5"), Limit("inl_pct", None, 0.5, "%")]
    )
    amps = [10.0, 20.0, 40.0, 80.0, 120.0]
    heights = [5.0 * a + 0.5 + 0.02 * a * a / 120 for a in amps]  # slight compression
    for a, h in zip(amps, heights, strict=True):
        for ch in (3, 4):  # channel 4 must not be picked up by the channel-3 analysis
            ctx.add_trace(
                named(
                    name="pulse",
                    trace=pulse_trace(h if ch == 3 else 2 * h),
                    labels={"channel": ch, "output": "x5", "amp": a},
                )
            )
    s = step(
        "gain/ch3/x5/analyse",
        "analyse.transfer",
        labels={"channel": 3, "output": "x5"},
        traces="pulse",
        x="amp",
        n_baseline=200,
        method="peak",
        deviation=1.0,
    )
    result = HANDLERS[s.kind](ctx, s)
    by_q = {m.quantity: m for m in result.measurements}
    # reference: numpy least squares on the same points
    slope, intercept = np.polyfit(amps, heights, 1)
    assert by_q["gain"].value == pytest.approx(slope, rel=1e-3)
    assert by_q["offset_mV"].value == pytest.approx(intercept, abs=0.05)
    assert by_q["gain"].verdict == "pass" and by_q["gain"].channel == 3
    assert by_q["gain"].output == "x5" and by_q["gain"].unit == "V/V"
    assert by_q["offset_mV"].verdict == "info"  # no limit
    residual = np.asarray(heights) - (slope * np.asarray(amps) + intercept)
    span = slope * (max(amps) - min(amps))
    # IEEE 1241 best-fit INL in % of span (REFERENCES.md)
    assert by_q["inl_pct"].value == pytest.approx(100 * np.abs(residual).max() / span, rel=1e-2)


def test_peaking_and_rise_time_of_cr_rc4():
    """CR-RC^4: peak at 4 tau; 10-90 % rise 2.0653 tau (Spieler 2005 ch. 4; REFERENCES.md)."""
    ctx = make_ctx()
    tau = 50.0
    ctx.add_trace(
        named(
            name="sh",
            trace=pulse_trace(100.0, tau_ns=tau, dt_ns=0.5, points=3000, pretrigger_ns=100.0),
            labels={"channel": 1, "output": "x1"},
        )
    )
    peak = step("p", "analyse.peaking", labels={"channel": 1}, traces="sh", n_baseline=200)
    m = HANDLERS[peak.kind](ctx, peak).measurements[0]
    assert m.quantity == "peaking_time_ns" and m.output == "shaped"  # default output per kind
    assert m.value == pytest.approx(4 * tau, rel=2e-3)
    rise = step(
        "r", "analyse.rise", labels={"channel": 1, "output": "x1"}, traces="sh", n_baseline=200
    )
    r = HANDLERS[rise.kind](ctx, rise).measurements[0]
    assert r.value == pytest.approx(2.0653 * tau, rel=5e-3) and r.output == "x1"


def test_noise_uses_gain_measured_earlier_and_corrects_averaging():
    ctx = make_ctx()
    rng = np.random.default_rng(7)
    ctx.add_measurement(Measurement(quantity="gain", value=5.0, unit="V/V", channel=2, output="x5"))
    for _ in range(4):
        t = pulse_trace(0.0, noise_mV=1.5, rng=rng, points=2000)
        ctx.add_trace(named(name="base", trace=t, labels={"channel": 2, "output": "x5"}))
    s = step(
        "n", "analyse.noise", labels={"channel": 2, "output": "x5"}, traces="base", n_baseline=0
    )
    m = HANDLERS[s.kind](ctx, s).measurements[0]
    # sample RMS of 8000 Gaussian values: relative sd 1/sqrt(2N) = 0.8 % (standard)
    assert m.value == pytest.approx(1.5 / 5.0, rel=0.03)
    assert m.uncertainty == pytest.approx(0.3 / math.sqrt(2 * 8000), rel=0.1)


def test_noise_without_gain_is_an_input_error():
    ctx = make_ctx()
    ctx.add_trace(
        named(
            name="base", trace=pulse_trace(0.0, noise_mV=1.0), labels={"channel": 1, "output": "x1"}
        )
    )
    s = step("n", "analyse.noise", labels={"channel": 1, "output": "x1"}, traces="base")
    with pytest.raises(AnalysisInputError, match="no gain"):
        HANDLERS[s.kind](ctx, s)


@pytest.mark.parametrize(
    ("gain", "uncertainty", "usable"),
    [
        (0.002, 0.004, False),  # a dead channel's fit: no gain within its uncertainty
        (0.03, 0.01, False),  # exactly 3 standard uncertainties: still not significant
        (float("nan"), None, False),  # the transfer analysis itself failed
        (0.0, None, False),
        (0.8, 0.01, True),  # low (a saturating channel) but a real gain: noise is referred
        (0.05, 0.01, True),  # 5 sigma
    ],
)
def test_noise_is_not_referred_through_a_gain_indistinguishable_from_zero(
    gain, uncertainty, usable
):
    # 3-sigma significance of the measured gain (common practice): below it the input-referred
    # noise is undefined, and the step fails its figure (NaN) instead of dividing by ~0
    ctx = make_ctx()
    ctx.add_measurement(
        Measurement(
            quantity="gain", value=gain, unit="V/V", uncertainty=uncertainty, channel=1, output="x1"
        )
    )
    ctx.add_trace(
        named(
            name="base", trace=pulse_trace(0.0, noise_mV=1.0), labels={"channel": 1, "output": "x1"}
        )
    )
    s = step("n", "analyse.noise", labels={"channel": 1, "output": "x1"}, traces="base")
    if usable:
        result = HANDLERS[s.kind](ctx, s)
        m = result.measurements[0]
        assert m.value == pytest.approx(result.results["baseline_rms_mV"] / gain)  # RMS / gain
        return
    with pytest.raises(AnalysisInputError, match="not distinguishable from zero"):
        HANDLERS[s.kind](ctx, s)


def test_crosstalk_victim_and_aggressor_channels():
    ctx = make_ctx()
    ctx.add_trace(named(name="agg", trace=pulse_trace(400.0), labels={"channel": 3}))
    ctx.add_trace(named(name="vic", trace=pulse_trace(4.0), labels={"channel": 3}))
    s = step(
        "x",
        "analyse.crosstalk",
        labels={"channel": 3},
        aggressor="agg",
        victim="vic",
        victim_channel=4,
        aggressor_channel=3,
        n_baseline=200,
    )
    m = HANDLERS[s.kind](ctx, s).measurements[0]
    assert m.value == pytest.approx(1.0, rel=1e-9)  # victim = 0.01 x aggressor
    assert (m.channel, m.aggressor) == (4, 3)


def s_curve_counts(thresholds, mu, sigma, trials):
    """Expected firings, eps = norm.sf(thr, mu, sigma) (REFERENCES.md threshold scans)."""
    return [round(trials * stats.norm.sf(t, mu, sigma)) for t in thresholds]


def test_s_curve_and_discriminator_offset():
    ctx = make_ctx()
    thr = list(np.arange(10.0, 40.0, 1.0))
    trials = 10000
    offset = 1.5
    for amp in (10.0, 20.0, 30.0):
        height = 1.0 * amp
        for t, k in zip(thr, s_curve_counts(thr, height + offset, 2.0, trials), strict=True):
            ctx.add_reading(Reading(name="n", value=k, labels={"channel": 1, "amp": amp, "thr": t}))
    one = step(
        "s",
        "analyse.s_curve",
        labels={"channel": 1, "amp": 20.0},
        counts="n",
        x="thr",
        trials=trials,
    )
    by_q = {m.quantity: m for m in HANDLERS[one.kind](ctx, one).measurements}
    assert by_q["threshold_mV"].value == pytest.approx(21.5, abs=0.02)
    assert by_q["threshold_sigma_mV"].value == pytest.approx(2.0, abs=0.02)
    assert by_q["threshold_mV"].output == "x1"
    disc = step(
        "d",
        "analyse.discriminator",
        labels={"channel": 1},
        counts="n",
        x="thr",
        amplitude="amp",
        trials=trials,
        gain=1.0,
    )
    m = HANDLERS[disc.kind](ctx, disc).measurements[0]
    assert m.quantity == "discriminator_offset_mV" and m.value == pytest.approx(offset, abs=0.03)


def test_leakage_is_per_board():
    ctx = make_ctx(limits=[Limit("leakage_nA", None, 20.0, "nA")])
    ctx.add_reading(Reading(name="hv", value={"volts": 30.0, "current_A": 6e-9}, labels={}))
    s = step("l", "analyse.leakage", reading="hv")
    m = HANDLERS[s.kind](ctx, s).measurements[0]
    assert (m.value, m.channel, m.output, m.verdict) == (pytest.approx(6.0), None, None, "pass")


def test_failed_analysis_gives_nan_fail_for_each_quantity():
    ctx = make_ctx()
    s = step(
        "gain/ch1/x1/analyse",
        "analyse.transfer",
        labels={"channel": 1, "output": "x1"},
        traces="missing",
        x="amp",
    )
    with pytest.raises(AnalysisInputError):
        HANDLERS[s.kind](ctx, s)
    res = failed_analysis(ctx, s, ValueError("boom"))
    assert [m.quantity for m in res.measurements] == ["gain", "offset_mV", "inl_pct"]
    assert all(math.isnan(m.value) and m.verdict == "fail" for m in res.measurements)
    # the reason travels with each value (stored per measurement) and with the step
    assert [m.reason for m in res.measurements] == ["boom"] * 3 and res.results["error"] == "boom"


def test_a_value_without_a_number_is_never_without_a_reason():
    from sequencer.engine.judge import NO_FINITE_VALUE, measure

    ctx = make_ctx(limits=[Limit("noise_in_mV", None, 0.6, "mV")])
    s = step("noise/ch1/x1/noise", "analyse.noise", labels={"channel": 1, "output": "x1"},
             traces="baseline")
    assert measure(ctx, s, "noise_in_mV", float("nan")).reason == NO_FINITE_VALUE
    assert measure(ctx, s, "noise_in_mV", float("nan"), reason="clipped").reason == "clipped"
    assert measure(ctx, s, "noise_in_mV", 0.4, reason="stale").reason == ""  # a value: no reason


def test_measurement_carries_the_decision_rule_qualifier():
    # ILAC-G8:09/2019 simple acceptance: a value whose interval ± 2u straddles the limit keeps
    # its verdict and is marked "within uncertainty" (the qualifier is its own field)
    from sequencer.engine.judge import measure
    from sequencer.engine.records import StepResult
    from sequencer.engine.runner import with_qualifiers

    ctx = make_ctx(limits=[Limit("noise_in_mV", None, 0.6, "mV")])
    s = step("noise/ch1/x1/noise", "analyse.noise", labels={"channel": 1, "output": "x1"},
             traces="baseline")
    near = measure(ctx, s, "noise_in_mV", 0.61, uncertainty=0.02)
    clear = measure(ctx, s, "noise_in_mV", 0.40, uncertainty=0.02)
    assert (near.verdict, near.qualifier) == ("fail", "within uncertainty")
    assert (clear.verdict, clear.qualifier) == ("pass", "")
    stored = with_qualifiers(StepResult(results={"traces": 2}, measurements=[near, clear]))
    assert stored["qualifiers"] == [
        {"quantity": "noise_in_mV", "channel": 1, "output": "x1", "aggressor": None,
         "qualifier": "within uncertainty"}
    ]

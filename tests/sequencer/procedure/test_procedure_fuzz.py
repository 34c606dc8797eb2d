"""Hypothesis: whatever the file holds, loading and planning raise ProcedureError or succeed, never crash."""

from __future__ import annotations

import dataclasses
from pathlib import Path

import yaml
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from sequencer.errors import ProcedureError
from sequencer.procedure import board_info, build_plan, load_procedure_text
from sequencer.procedure.kinds import KINDS

ROOT = Path(__file__).resolve().parents[3]
# the PA8's declared input and threshold ranges are tested on their own
# (test_procedure_input_range.py); the plausible values drawn here (a sine around 10 mV, negative
# thresholds) need not fall inside them, so this board declares none
PA8 = dataclasses.replace(
    board_info("PA8", "NR-PA8-0001"), input_range_mV=None, threshold_range_mV=None
)
QUICK = (ROOT / "procedures/examples/quick-gain.yaml").read_text()

scalars = st.one_of(
    st.none(),
    st.booleans(),
    st.integers(-10, 20),
    st.floats(allow_nan=True, allow_infinity=True),
    st.sampled_from(
        [
            "40 mV",
            "1 s",
            "2 V/s",
            "x1",
            "x5",
            "all",
            "{channel}",
            "{amp}",
            "{1 +}",
            "{board.channels}",
            "{channel + 1}",
            "trace_{output}",
            "{{",
            "}",
            "{max(amps)}",
            "1 GS/s",
            "{amps}",
            "-3 V",
        ]
    ),
    st.text(max_size=8),
)
values = st.recursive(
    scalars,
    lambda inner: (
        st.lists(inner, max_size=3)
        | st.dictionaries(st.sampled_from(["linspace", "range", "mV", "x"]), inner, max_size=2)
    ),
    max_leaves=6,
)


PLAUSIBLE = {
    "voltage": ["40 mV", "10 mV", "{amp}", "{2 * amp}"],
    "bias_voltage": ["20 V", "5 V"],
    "time": ["50 ns"],
    "duration": ["0.01 s", "{0.5 ms}"],
    "frequency": ["1 kHz"],
    "slew": ["2 V/s"],
    "current": ["10 uA"],
    "int": [1, 2, "{channel}", "{n}"],
    "float": [1.0],
    "bool": [True, False],
    "str": ["x1", "{output}"],
    "name": ["t1", "amp"],
    "names": [["t1"]],
    "ints": [[1]],
    "percent": ["1 %"],
}


def leaf_steps():
    def one(kind):
        spec = KINDS[kind]
        names = [a.name for a in spec.args] + ["bogus"]
        junk = st.dictionaries(st.sampled_from(names), values, max_size=4)
        plausible = st.fixed_dictionaries(
            {a.name: st.sampled_from(list(a.choices) or PLAUSIBLE[a.dimension]) for a in spec.args}
        )
        return st.one_of(values, junk, plausible, plausible).map(lambda args: {kind: args})

    return st.sampled_from(sorted(KINDS)).flatmap(one)


def with_common(step):
    return st.fixed_dictionaries(
        {},
        optional={
            "name": st.sampled_from(["a", "b", "x/y", 3]),
            "when": st.sampled_from(["channel < 8", "true", "1", "amp > 5 mV"]),
        },
    ).map(lambda extra: {**step, **extra})


steps = st.recursive(
    leaf_steps(),
    lambda inner: st.one_of(
        st.lists(inner, max_size=3).map(lambda body: {"for_channels": "all", "do": body}),
        st.lists(inner, max_size=3).map(lambda body: {"for_outputs": ["x1", "x5"], "do": body}),
        st.tuples(values, st.lists(inner, max_size=3)).map(
            lambda t: {"sweep": {"amp": t[0]}, "do": t[1]}
        ),
        st.lists(inner, max_size=3).map(lambda body: {"group": "g", "do": body}),
    ),
    max_leaves=8,
).flatmap(with_common)

procedures = st.fixed_dictionaries(
    {
        "name": st.just("fuzz"),
        "version": st.just(1),
        "board_type": st.just("PA8"),
        "steps": st.lists(steps, max_size=5),
    },
    optional={
        "parameters": st.one_of(
            st.dictionaries(st.sampled_from(["amp", "amps", "n", "board"]), values, max_size=3),
            st.just({"amp": "40 mV", "amps": ["10 mV", "20 mV"], "n": 2}),
        ),
        "hazards": st.sampled_from([["bias"], [], ["bais"]]),
        "defaults": st.dictionaries(st.sampled_from(["ramp_rate", "rate"]), values, max_size=1),
        "limits": st.sampled_from(["PA8", "nope", {"set": [{"quantity": "gain"}]}]),
        "cleanup": st.lists(steps, max_size=2),
    },
)


def _load_and_plan(text: str) -> None:
    try:
        build_plan(load_procedure_text(text, "fuzz.yaml", {}), PA8)
    except ProcedureError as exc:
        assert exc.problems
        for problem in exc.problems:
            assert problem.location.line >= 1 and problem.location.column >= 1
            assert problem.message


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(procedures)
def test_generated_procedures_never_crash(data):
    _load_and_plan(yaml.safe_dump(data, sort_keys=False, allow_unicode=True))


@settings(max_examples=150, deadline=None)
@given(st.integers(0, len(QUICK) - 1), st.integers(0, 40), st.text(max_size=6))
def test_mutated_shipped_procedure_never_crashes(at, cut, insert):
    _load_and_plan(QUICK[:at] + insert + QUICK[at + cut :])


def plausible_leaf():
    kinds = sorted(k for k in KINDS if not k.startswith("analyse."))
    return st.sampled_from(kinds).flatmap(
        lambda kind: st.fixed_dictionaries(
            {
                a.name: st.sampled_from(list(a.choices) or PLAUSIBLE[a.dimension])
                for a in KINDS[kind].args
            }
        ).map(lambda a: {kind: a})
    )


nested = st.lists(plausible_leaf(), min_size=1, max_size=4).map(
    lambda body: {"for_channels": [1, 2], "do": [{"for_outputs": "all", "do": body}]}
)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(nested, min_size=1, max_size=2))
def test_plausible_procedures_plan_and_stay_deterministic(body):
    data = {
        "name": "p",
        "version": 1,
        "board_type": "PA8",
        "hazards": ["bias"],
        "parameters": {"amp": "40 mV", "n": 2},
        "defaults": {"ramp_rate": "2 V/s"},
        "steps": [{"group": f"g{i}", "do": [b]} for i, b in enumerate(body)],
    }
    text = yaml.safe_dump(data, sort_keys=False)
    try:
        first = build_plan(load_procedure_text(text, "p.yaml", {}), PA8)
    except ProcedureError as exc:
        # the only expected refusal: two unnamed leaves of one kind are numbered, so paths stay unique
        raise AssertionError(str(exc)) from None
    second = build_plan(load_procedure_text(text, "p.yaml", {}), PA8)
    assert len(first.steps) == sum(len(b["do"][0]["do"]) for b in body) * 2 * 3
    assert [(s.path, dict(s.args)) for s in first.steps] == [
        (s.path, dict(s.args)) for s in second.steps
    ]
    assert len({s.path for s in first.steps}) == len(first.steps)

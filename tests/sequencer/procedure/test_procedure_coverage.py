"""validate/plan/run warn when a quantity the limit set limits is measured without the keys its limit
needs (issue 16): the value would be stored unjudged (verdict info) and no limit would apply."""

from __future__ import annotations

from click.testing import CliRunner

from sequencer.cli import cli
from sequencer.procedure import board_info, build_plan, load_procedure_text, unjudged_warnings

ROUTED = """name: routed
version: "1.0"
board_type: PA8
roles: [pulser, scope, switch]
limits: PA8
steps:
  - for_channels: [1, 2]
    do:
      - switch.route: {{channel: "{{channel}}", output: x5, input: 1}}
{body}
"""
SCAN = """      - sweep: {amp: [10 mV, 20 mV, 30 mV]}
        do:
          - pulser.amplitude: "{amp}"
          - scope.capture: {inputs: [1], into: [pulses]}
      - analyse.transfer: {traces: pulses, x: amp}
"""


def _plan(text: str):
    return build_plan(load_procedure_text(text, "routed.yaml"), board_info("PA8", "NR-PA8-0001"))


def _indented(text: str, spaces: int) -> str:
    return "".join(" " * spaces + line + "\n" for line in text.splitlines())


def test_an_output_routed_without_for_outputs_is_warned_about():
    # procedures/limits/PA8.yaml limits gain per output (x1, x5) only; offset and INL for all outputs
    plan = _plan(ROUTED.format(body=SCAN))
    [line] = unjudged_warnings(plan)
    assert line.startswith("ch1/transfer (and 1 more step(s)): gain is measured without an output")
    assert "x1, x5" in line and "for_outputs" in line


def test_the_same_scan_inside_for_outputs_is_judged():
    body = "      - for_outputs: [x5]\n        do:\n" + _indented(SCAN, 4)
    assert unjudged_warnings(_plan(ROUTED.format(body=body))) == []


def test_validate_and_plan_print_the_warning(tmp_path):
    proc = tmp_path / "routed.yaml"
    proc.write_text(ROUTED.format(body=SCAN))
    for args in (["validate", str(proc)], ["plan", str(proc)]):
        result = CliRunner().invoke(cli, args, catch_exceptions=False)
        assert result.exit_code == 0, result.output
        assert "gain is measured without an output" in result.stderr

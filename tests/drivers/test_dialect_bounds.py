"""Dialect template field widths and precisions are bounded at load (issue 19 item 6): a field
``{volts:>9999999999}`` would build a 10 GB string on the first render."""

from __future__ import annotations

import tracemalloc

import pytest

from drivers.dialect import parse_dialect
from drivers.errors import ConfigError


def errors_of(template: str) -> list[str]:
    text = f'dialect: lab\nroles:\n  pulser:\n    set_amplitude: {{write: "{template}"}}\n'
    with pytest.raises(ConfigError) as exc:
        parse_dialect(text, "lab.yaml")
    return [str(p) for p in exc.value.problems]


@pytest.mark.parametrize(
    ("template", "message"),
    [
        ("VOLT {volts:>9999999999}", "width 9999999999 is above 64 characters"),
        ("VOLT {volts:065}", "width 65 is above 64"),
        ("VOLT {volts:.99999999f}", "precision 99999999 is above 32 digits"),
        ("VOLT {volts:x^64.33e}", "precision 33 is above 32"),
    ],
)
def test_too_wide_fields_are_refused_located_before_any_render(template, message):
    tracemalloc.start()
    try:
        problems = errors_of(template)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert len(problems) == 1 and problems[0].startswith("lab.yaml:4:28: pulser.set_amplitude:")
    assert message in problems[0]
    assert peak < 8 * 2**20  # nothing near the width was ever allocated


@pytest.mark.parametrize("spec", [".9g", "+.6e", "0>12", "*^64.32e", ">10"])
def test_ordinary_widths_and_precisions_still_load(spec):
    d = parse_dialect(
        f'dialect: lab\nroles:\n  pulser:\n    set_amplitude: {{write: "VOLT {{volts:{spec}}}"}}\n',
        "lab.yaml",
    )
    # Python's format mini-language (docs.python.org, "Format Specification Mini-Language")
    assert d.command("pulser", "set_amplitude", volts=0.25) == f"VOLT {format(0.25, spec)}"

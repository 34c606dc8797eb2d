"""Dialect files: the shipped generic dialect, and bad files reported as file:line:column."""

import textwrap

import pytest

from drivers.dialect import OPERATIONS, load_dialect, parse_dialect
from drivers.errors import ConfigError


def errors_of(text: str) -> list[str]:
    with pytest.raises(ConfigError) as exc:
        parse_dialect(textwrap.dedent(text), "lab.yaml")
    return [str(p) for p in exc.value.problems]


def test_generic_dialect_covers_every_operation_the_drivers_use():
    d = load_dialect("generic")
    format_1_only = {("common", "byte_order")}  # format 2 says it at open and in waveform.data
    missing = [(r, o) for r, ops in OPERATIONS.items() for o in ops if not d.declares(r, o)]
    assert set(missing) == format_1_only
    absent = [(r, o) for r, ops in OPERATIONS.items() for o in ops if d.declares(r, o)
              and not d.has(r, o)]  # fmt: skip
    assert absent == [("bias", "set_keep_alive")]  # not in SCPI-1999's standard commands
    assert d.format == 2 and d.waveform is not None
    assert d.waveform.data.big_endian and d.waveform.data.kind == "int16"
    # disc: a discriminator's logic output, coinc: the coincidence unit's output (issue 18)
    expected = {"x1": 1, "x5": 2, "shaped": 3, "disc": 4, "coinc": 5}
    assert d.table("switch", "outputs") == expected


def test_generic_templates_give_scpi_1999_long_forms():
    d = load_dialect("generic")
    assert d.command("scope", "set_range", input=2, volts=0.5) == "SENSe:VOLTage2:RANGe:UPPer 0.5"
    assert d.command("bias", "set_output", state=False) == "OUTPut:STATe OFF"
    assert d.command("switch", "route", input=1, output_index=2, channel=3) == "ROUTe:CLOSe (@1203)"
    assert d.returns("scope", "fetch") == "block"
    assert d.returns("pulser", "trigger") == ""


def test_arguments_cannot_smuggle_a_second_command():
    d = load_dialect("generic")
    with pytest.raises(ValueError):
        d.command("pulser", "set_trigger_source", source="BUS;*RST")


def test_a_minimal_lab_dialect_loads():
    d = parse_dialect(
        'dialect: lab-pg\nroles:\n  pulser:\n    set_amplitude: {write: "AMPL {volts:.4f}V"}\n',
        "lab.yaml",
    )
    assert d.command("pulser", "set_amplitude", volts=0.1) == "AMPL 0.1000V"
    assert not d.has("pulser", "trigger")
    with pytest.raises(ConfigError, match=r"no operation pulser\.trigger"):
        d.command("pulser", "trigger")


def test_unknown_role_and_operation_are_located_with_a_hint():
    problems = errors_of(
        """\
        dialect: lab
        roles:
          scop:
            set_range: {write: "X"}
          scope:
            set_rnge: {write: "RANG {volts}"}
        """
    )
    assert "lab.yaml:3:3: unknown role 'scop' (did you mean 'scope'?)" in problems
    assert (
        "lab.yaml:6:5: unknown scope operation 'set_rnge' (did you mean 'set_range'?)" in problems
    )


def test_write_given_as_query_and_missing_returns():
    problems = errors_of(
        """\
        dialect: lab
        roles:
          bias:
            set_voltage: {query: "VOLT?"}
            measure_current: {query: "CURR?"}
        """
    )
    assert problems[0] == "lab.yaml:4:19: bias.set_voltage is a write, not a query"
    assert problems[1].startswith(
        "lab.yaml:5:22: bias.measure_current must declare 'returns: float'"
    )


def test_template_field_the_driver_does_not_supply():
    problems = errors_of(
        'dialect: lab\nroles:\n  threshold:\n    set_level: {write: "DAC{channel}:LEV {volt}"}\n'
    )
    assert len(problems) == 1
    assert problems[0].startswith(
        "lab.yaml:4:24: threshold.set_level: unknown field {volt} (did you mean 'volts'?)"
    )


def test_bad_format_spec_is_caught_at_load():
    problems = errors_of(
        'dialect: lab\nroles:\n  counter:\n    set_gate_time: {write: "GATE {seconds:d}"}\n'
    )
    assert "does not format" in problems[0] and problems[0].startswith("lab.yaml:4:28:")


def test_yaml_syntax_error_is_located():
    problems = errors_of("dialect: lab\nroles:\n  pulser: {set_amplitude: {write: 'A'}\n")
    assert problems[0].startswith("lab.yaml:4:1: YAML syntax") or problems[0].startswith(
        "lab.yaml:3"
    )


def test_unknown_top_level_and_operation_keys():
    problems = errors_of(
        'dialect: lab\nrole: {}\nroles:\n  pulser:\n    trigger: {write: "*TRG", retruns: int}\n'
    )
    assert "lab.yaml:2:1: unknown top-level key 'role' (did you mean 'roles'?)" in problems
    assert (
        "lab.yaml:5:30: unknown key of pulser.trigger 'retruns' (did you mean 'returns'?)"
        in problems
    )


def test_binary_section_sets_byte_order():
    d = parse_dialect(
        "dialect: lab\nbinary: {data_format: 'INTeger,16', kind: int16, byte_order: little}\nroles: {}\n",
        "lab.yaml",
    )
    assert d.binary.big_endian is False
    problems = errors_of("dialect: lab\nbinary: {byte_order: middle}\nroles: {}\n")
    assert problems[0].startswith("lab.yaml:2:22: byte_order must be")


def test_byte_order_follows_the_common_command_without_a_binary_section():
    swapped = parse_dialect(
        'dialect: lab\ncommon:\n  byte_order: {write: "FORMat:BORDer SWAPped"}\nroles: {}\n',
        "lab.yaml",
    )
    assert swapped.binary.big_endian is False
    assert load_dialect("generic").waveform.data.big_endian is True  # FORMat:BORDer NORMal


def test_missing_dialect_file_is_a_config_error(tmp_path):
    with pytest.raises(ConfigError, match="cannot read dialect file"):
        load_dialect(tmp_path / "nope.yaml")


@pytest.mark.parametrize("field", ["{volts.9g}", "{volts.real}", "{volts[0]}", "{volts.__class__}"])
def test_attribute_and_index_lookups_in_a_template_are_refused(field):
    # found by the structure-aware fuzzer: "{volts.9g}" (a colon lost) crashed the loader with
    # AttributeError; a lookup on a value is never what a command template means
    problems = errors_of(
        f'dialect: lab\nroles:\n  bias:\n    set_voltage: {{write: "VOLT {field}"}}\n'
    )
    assert len(problems) == 1 and problems[0].startswith("lab.yaml:4:")
    assert "must be a plain name such as {volts}" in problems[0]

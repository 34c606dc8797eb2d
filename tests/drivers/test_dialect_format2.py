"""Dialect format 2: arithmetic templates, value maps, sequences, reply rules, at-open commands,
per-operation timeouts and error checks -- each over the scripted link, exact bytes on the wire."""

import textwrap

import pytest

from drivers.benchfile import InstrumentSpec
from drivers.dialect import parse_dialect
from drivers.errors import ConfigError, InstrumentTimeout
from drivers.roles.bias import BiasSupply
from drivers.roles.pulser import Pulser
from drivers.roles.scope import Scope
from drivers.scpi.session import ScpiSession
from drivers.scpi.templates import ExpressionError, compile_expression, compile_template
from tests.drivers.scripted import ScriptedTransport, configured


def dialect(body: str):
    return parse_dialect("dialect: lab\nformat: 2\n" + textwrap.dedent(body), "lab.yaml")


def problems(body: str) -> list[str]:
    with pytest.raises(ConfigError) as exc:
        dialect(body)
    return [str(p) for p in exc.value.problems]


def test_arithmetic_over_fields_and_current_settings():
    d = dialect(
        """\
        roles:
          scope:
            set_range: {write: "CHANnel{input}:SCALe {volts / 8:.6g}"}
            set_points: {write: "ACQuire:POINts {count}"}
            set_sample_rate: {write: "TIMebase:SCALe {points / hertz / 10:.6g}"}
        """
    )
    t = ScriptedTransport().expect(
        configured("CHANnel1:SCALe 0.0625"),  # 0.5 V full scale / 8 divisions
        configured("ACQuire:POINts 1000"),
        configured("TIMebase:SCALe 1e-07"),  # 1000 points / 1 GS/s / 10 divisions
    )
    scope = Scope(ScpiSession(t), d)
    scope._write("set_range", input=1, volts=0.5)
    scope._write("set_points", count=1000)
    scope._write("set_sample_rate", hertz=1e9)
    t.assert_done()


def test_a_setting_not_yet_sent_is_a_located_error_not_a_guess():
    d = dialect(
        """\
        roles:
          scope:
            set_sample_rate: {write: "TIMebase:SCALe {points / hertz / 10:.6g}"}
        """
    )
    scope = Scope(ScpiSession(ScriptedTransport()), d)
    with pytest.raises(ConfigError, match=r"lab.yaml:5:\d+: .*no value for points"):
        scope._write("set_sample_rate", hertz=1e9)


def test_value_maps_for_booleans_and_enumerations():
    d = dialect(
        """\
        roles:
          pulser:
            values: {source: {EXTernal: EXT, BUS: BUS, IMMediate: INT}}
            set_output: {write: "OUTP {state}", values: {state: {ON: "1", OFF: "0"}}}
            set_trigger_source: {write: "TRIG:SOUR {source}"}
        """
    )
    assert d.command("pulser", "set_output", state=True) == "OUTP 1"
    assert d.command("pulser", "set_output", state=False) == "OUTP 0"
    assert d.command("pulser", "set_trigger_source", source="IMMediate") == "TRIG:SOUR INT"
    with pytest.raises(ValueError, match="none of the values"):
        d.command("pulser", "set_trigger_source", source="MANual")


def test_sequence_with_conditions_for_an_averaging_mode():
    d = dialect(
        """\
        roles:
          scope:
            set_average_count:
              sequence:
                - {write: "ACQuire:TYPE NORMal", when: "count == 1"}
                - {write: "ACQuire:TYPE AVERage", when: "count > 1"}
                - {write: "ACQuire:COUNt {count}", when: "count > 1"}
        """
    )
    t = ScriptedTransport().expect(
        configured("ACQuire:TYPE NORMal"),
        configured("ACQuire:TYPE AVERage"),
        configured("ACQuire:COUNt 16"),
    )
    scope = Scope(ScpiSession(t), d)
    scope.set_averages(1)
    scope.set_averages(16)
    t.assert_done()


def test_poll_until_a_condition_and_its_own_deadline():
    d = dialect(
        """\
        roles:
          scope:
            acquire:
              sequence:
                - {write: "SINGle"}
                - {poll: "ACQuire:STATe?", until: "value == 0", every_ms: 1, timeout_ms: 2000}
        """
    )
    t = ScriptedTransport().expect(
        configured("SINGle"),
        ("ACQuire:STATe?", b"1\n"),
        ("ACQuire:STATe?", b"1\n"),
        ("ACQuire:STATe?", b"0\n"),
    )
    scope = Scope(ScpiSession(t), d)
    scope._write("acquire", reapply=False)
    t.assert_done()
    # a condition that never holds ends at the poll's deadline, as a timeout naming the query
    d2 = dialect(
        """\
        roles:
          scope:
            acquire:
              sequence:
                - {poll: "ACQuire:STATe?", until: "value == 0", every_ms: 1, timeout_ms: 1}
        """
    )
    busy = ScriptedTransport().expect(*[("ACQuire:STATe?", b"1\n")] * 200)
    with pytest.raises(InstrumentTimeout, match="did not hold within 1 ms"):
        Scope(ScpiSession(busy), d2)._write("acquire", reapply=False)


def test_at_open_commands_and_writes_without_an_error_check():
    d = parse_dialect(
        "dialect: lab\nformat: 2\ncheck_errors: false\n"
        "roles:\n  pulser:\n    at_open: ['SYSTem:HEADer OFF']\n"
        "    set_amplitude: {write: 'VOLT {volts:.3f}'}\n"
        "    trigger: {write: '*TRG', check_errors: true}\n",
        "lab.yaml",
    )
    t = ScriptedTransport().expect(("SYSTem:HEADer OFF", None), ("VOLT 0.040", None))
    t.expect(configured("*TRG"))
    pulser = Pulser(ScpiSession(t, check_errors=d.check_errors), d)
    pulser.set_amplitude(40.0)
    pulser.trigger()
    t.assert_done()


def test_reply_rules_in_a_dialect():
    d = dialect(
        """\
        roles:
          bias:
            measure_voltage: {query: "READ?", reply: {field: volts, fields: [volts, amps, status]}}
            measure_current: {query: "READ?", reply: {field: 2}}
            get_output: {query: "OUTP?", reply: {words: {ON: true, OFF: false}}}
            get_voltage_setpoint: {query: "VOLT?", reply: {header: true, unit: V}}
            tripped: {query: "STAT:QUES:COND?", reply: {bit: 4}}
        """
    )
    t = ScriptedTransport().expect(
        ("READ?", b"+1.000000E+01,+2.500000E-06,+0\n"),
        ("READ?", b"+1.000000E+01,+2.500000E-06,+0\n"),
        ("OUTP?", b"OFF\n"),
        ("VOLT?", b":VOLT 500mV\n"),
        ("STAT:QUES:COND?", b"16\n"),
    )
    spec = InstrumentSpec(role="bias", address=t.address, max_volts=60, max_ramp_V_per_s=5)
    bias = BiasSupply(ScpiSession(t), d, spec)
    assert bias.voltage() == 10.0
    assert bias.current_A() == pytest.approx(2.5e-6)
    assert bias.output_on() is False
    assert bias.setpoint() == pytest.approx(0.5)
    assert bias.tripped() is True
    t.assert_done()


def test_format_2_problems_are_located():
    found = problems(
        """\
        roles:
          scope:
            set_range: {write: "SCAL {volts.real}"}
            set_offset: {write: "OFFS {__import__('os')}"}
            set_points: {write: "POIN {count ** 99999:d}"}
            set_average_count: {sequence: [{write: "A", when: "count >"}]}
            acquire: {sequence: [{poll: "ACQ?"}]}
            get_sample_rate: {query: "SRAT?", reply: {separator: "|", bit: 99}}
            set_trigger_level: {write: "TRIG {volts}", values: {volt: {1: "1"}}}
        """
    )
    text = "\n".join(found)
    assert len(found) == 8, text
    assert "lab.yaml:5:24: scope.set_range: field {volts.real} must be a plain name" in text
    assert "lab.yaml:6:25: scope.set_offset: \"__import__('os')\": only the functions" in text
    assert "lab.yaml:7:25: scope.set_points: template" in text and "above 1e+18" in text
    assert "lab.yaml:8:55: scope.set_average_count step 1: when: 'count >' is not an" in text
    assert "lab.yaml:9:33: scope.acquire step 1: a poll needs 'until:'" in text
    assert "lab.yaml:10:58: scope.get_sample_rate: reply separator must be" in text
    assert "lab.yaml:10:68: scope.get_sample_rate: reply bit must be a bit number" in text
    assert (
        "lab.yaml:11:57: scope.set_trigger_level: values for unknown field 'volt' (did you mean 'volts'?)"
        in text
    )


def test_the_safe_evaluator_refuses_what_is_not_arithmetic():
    for text in ["__import__('os')", "volts.real", "[1, 2]", "'a' * 9", "lambda: 1", "f(1)"]:
        with pytest.raises(ExpressionError):
            compile_expression(text, {"volts"})
    huge = compile_expression("volts * 1e300", {"volts"})
    with pytest.raises(ExpressionError, match="not finite or above"):
        huge.evaluate({"volts": 10.0})
    with pytest.raises(ExpressionError):
        compile_expression("volts / 0", {"volts"}).evaluate({"volts": 1.0})
    assert compile_template("{max(1, count // 2)}", {"count"}).render({"count": 9}) == "4"


def test_a_kept_render_is_the_text_a_fresh_template_renders():
    """A computing template keeps its texts by the values read; every text it gives must be the
    one a template that never rendered before gives for the same values, whatever came first."""
    text = "CHANnel{input:d}:SCALe {volts / 8:.9g} {volts * 1} {input * 1}"
    kept = compile_template(text, {"input", "volts"})
    cases = [
        {"input": 1, "volts": 0.8}, {"input": 2, "volts": 0.8}, {"input": 1, "volts": 0.8},
        {"input": 1, "volts": -0.0}, {"input": 1, "volts": 0.0}, {"input": 1, "volts": -0.0},
        {"input": 1, "volts": 8}, {"input": 1, "volts": 8.0}, {"input": 1, "volts": True},
        {"input": 3, "volts": 8}, {"input": 1, "volts": 8},
    ]  # fmt: skip
    for values in cases * 2:
        fresh = compile_template(text, {"input", "volts"})
        assert kept.render(values) == fresh.render(values), values
    zero = compile_template("{volts * 1:g}", {"volts"})
    assert [zero.render({"volts": v}) for v in (0.0, -0.0, 0.0)] == ["0", "-0", "0"]
    assert [zero.render({"volts": v}) for v in (1, 1.0, True)] == ["1", "1", "1"]


def test_a_refused_render_is_refused_again_and_a_constant_one_kept():
    scale = compile_template("SCALe {volts / 8:.9g}", {"volts"})
    for _ in range(2):
        with pytest.raises(ExpressionError, match="not a number"):
            scale.render({"volts": "1;*RST"})
        with pytest.raises(ExpressionError, match="no value for volts"):
            scale.render({})
    assert scale.render({"volts": 8.0}) == "SCALe 1"
    constant = compile_template("INITiate:IMMediate", set())
    assert constant.render({}) is constant.render({"volts": 1.0})  # made once, then given again
    assert constant.render({}) == "INITiate:IMMediate"


def test_format_1_files_still_read_and_new_keys_need_format_2():
    old = parse_dialect(
        "dialect: old\nroles:\n  pulser:\n    trigger: {write: '*TRG'}\n", "old.yaml"
    )
    assert old.format == 1 and old.has("pulser", "trigger")
    with pytest.raises(ConfigError, match=r"old.yaml:4:30: unknown key of pulser\.trigger 'reply'"):
        parse_dialect(
            "dialect: old\nroles:\n  pulser:\n    trigger: {write: '*TRG', reply: {}}\n",
            "old.yaml",
        )

"""Bench files: loading, located errors with "did you mean", opening roles over scripted links."""

import datetime as dt
import textwrap

import pytest

from drivers.bench import load_bench, open_bench
from drivers.benchfile import instrument_warnings
from drivers.errors import ConfigError, ConnectionRefused
from drivers.instruments import describe_bench, format_reports
from drivers.scpi.session import Identity
from drivers.transport import DEFAULT_BUSY_POLL_US
from tests.drivers.scripted import ScriptedTransport

GOOD = """\
bench: bench-2
instruments:   # roles: pulser, scope, threshold, counter, bias, switch
  pulser: {address: "TCPIP0::127.0.0.1::5025::SOCKET", dialect: generic, expect_id: "", calibration_due: 2027-06-30}
  bias:   {address: "TCPIP0::127.0.0.1::5029::SOCKET", dialect: generic, max_volts: 60, max_ramp_V_per_s: 5}
"""


def write(tmp_path, text, name="bench.yaml"):
    path = tmp_path / name
    path.write_text(textwrap.dedent(text))
    return path


def problems(tmp_path, text) -> list[str]:
    with pytest.raises(ConfigError) as exc:
        load_bench(write(tmp_path, text))
    return [str(p).replace(str(tmp_path) + "/", "") for p in exc.value.problems]


def test_design_example_loads_with_defaults(tmp_path):
    spec = load_bench(write(tmp_path, GOOD))
    assert spec.name == "bench-2" and list(spec.instruments) == ["pulser", "bias"]
    pulser = spec.instruments["pulser"]
    assert pulser.calibration_due == dt.date(2027, 6, 30)
    assert (pulser.visa_library, pulser.read_termination, pulser.write_termination) == (
        "@py",
        "\n",
        "\n",
    )
    assert (
        spec.instruments["bias"].max_volts == 60.0
        and spec.instruments["bias"].max_current_uA is None
    )
    assert "bench-2" in spec.text


def test_extended_keys(tmp_path):
    spec = load_bench(
        write(
            tmp_path,
            """\
            bench: b
            instruments:
              scope: {address: "TCPIP0::10.1.2.3::INSTR", read_termination: CRLF, write_termination: "\\n",
                      timeout_ms: 20000, chunk_size: 4194304, visa_library: "@py",
                      busy_poll_us: 0}
              bias: {address: "X", max_volts: 70, max_ramp_V_per_s: 10, max_current_uA: 25}
            """,
        )
    )
    scope = spec.instruments["scope"]
    assert (scope.read_termination, scope.write_termination) == ("\r\n", "\n")
    assert (scope.timeout_ms, scope.chunk_size, scope.busy_poll_us) == (20000, 4194304, 0)
    assert spec.instruments["bias"].busy_poll_us == DEFAULT_BUSY_POLL_US
    assert spec.instruments["bias"].max_current_uA == 25.0


def test_unknown_keys_and_roles_give_did_you_mean(tmp_path):
    found = problems(
        tmp_path,
        """\
        bench: b
        instruments:
          pulsar: {address: "A"}
          scope: {adress: "B"}
        """,
    )
    assert "bench.yaml:3:3: unknown role 'pulsar' (did you mean 'pulser'?)" in found
    assert "bench.yaml:4:11: unknown scope key 'adress' (did you mean 'address'?)" in found
    assert "bench.yaml:4:10: scope: missing 'address:'" in found


def test_bias_needs_its_limits_and_only_bias_has_them(tmp_path):
    found = problems(
        tmp_path,
        """\
        bench: b
        instruments:
          bias: {address: "A", max_volts: 60}
          pulser: {address: "B", max_volts: 5}
        """,
    )
    assert any(p.startswith("bench.yaml:3:9: bias: missing 'max_ramp_V_per_s:'") for p in found)
    assert "bench.yaml:4:26: pulser: max_volts applies to the bias supply only" in found


@pytest.mark.parametrize(
    ("entry", "message"),
    [
        ('{address: "A", timeout_ms: 0}', "timeout_ms must be an integer"),
        ('{address: "A", busy_poll_us: -5}', "busy_poll_us must be an integer"),
        ('{address: "A", calibration_due: "next year"}', "calibration_due must be a date"),
        ('{address: "A", read_termination: ""}', "every query times out"),
        ('{address: "A", dialect: no-such}', "dialect 'no-such' not found"),
        ('{address: ""}', "address must be a non-empty string"),
    ],
)
def test_bad_values_are_located(tmp_path, entry, message):
    found = problems(tmp_path, f"bench: b\ninstruments:\n  pulser: {entry}\n")
    assert len(found) == 1 and found[0].startswith("bench.yaml:3:") and message in found[0]


def test_dialect_path_is_relative_to_the_bench_file_and_checked(tmp_path):
    (tmp_path / "dialects").mkdir()
    (tmp_path / "dialects" / "lab-dac.yaml").write_text(
        'dialect: lab-dac\nroles:\n  threshold:\n    set_level: {write: "DAC{channel:d} {volt}"}\n'
    )
    found = problems(
        tmp_path,
        'bench: b\ninstruments:\n  threshold: {address: "A", dialect: dialects/lab-dac.yaml}\n',
    )
    assert found[0].startswith(
        "dialects/lab-dac.yaml:4:24: threshold.set_level: unknown field {volt}"
    )
    (tmp_path / "dialects" / "lab-dac.yaml").write_text(
        'dialect: lab-dac\nroles:\n  threshold:\n    set_level: {write: "DAC{channel:d} {volts}"}\n'
    )
    spec = load_bench(
        write(
            tmp_path,
            'bench: b\ninstruments:\n  threshold: {address: "A", dialect: dialects/lab-dac.yaml}\n',
        )
    )
    assert spec.instruments["threshold"].dialect == str(tmp_path / "dialects" / "lab-dac.yaml")


def test_yaml_syntax_error_in_bench_is_located(tmp_path):
    found = problems(tmp_path, "bench: b\ninstruments:\n  pulser: {address: 'A'\n")
    assert found[0].startswith("bench.yaml:") and "YAML syntax" in found[0]


def test_warnings_for_identity_and_calibration():
    spec = load_spec_pulser(expect_id="nordlicht,pg-7", due=dt.date(2025, 1, 31))
    other = Identity("ACME", "Pulse 9", "1", "2", "ACME,Pulse 9,1,2")
    warnings = instrument_warnings(spec, other, dt.date(2025, 2, 10))
    assert warnings == [
        "pulser: identity 'ACME,Pulse 9,1,2' does not match expect_id 'nordlicht,pg-7'",
        "pulser: calibration was due 2025-01-31 (10 days ago)",
    ]
    same = Identity("Nordlicht", "PG-7", "NR-PG-0042", "1.0", "Nordlicht,PG-7,NR-PG-0042,1.0")
    assert instrument_warnings(spec, same, dt.date(2025, 1, 31)) == []  # due today is not past due


def load_spec_pulser(*, expect_id: str, due: dt.date):
    from drivers.bench import InstrumentSpec

    return InstrumentSpec(role="pulser", address="A", expect_id=expect_id, calibration_due=due)


IDN = ("*IDN?", b"Nordlicht,PG-7,NR-PG-0042,1.0\n")


def test_open_bench_identifies_sets_up_and_closes_all(tmp_path):
    spec = load_bench(write(tmp_path, GOOD.replace('expect_id: ""', 'expect_id: "ACME"')))
    links = {
        "pulser": ScriptedTransport(address="P").expect(IDN),
        "bias": ScriptedTransport(address="B").expect(
            ("*IDN?", b"Nordlicht,HV-2,NR-HV-0007,3.1\n")
        ),
    }
    with open_bench(spec, opener=lambda inst: links[inst.role]) as bench:
        assert bench.identities()["bias"].model == "HV-2"
        assert bench.scope is None and bench.pulser is not None and bench.bias.max_volts == 60.0
        assert bench.check(dt.date(2027, 7, 1)) == [
            "pulser: identity 'Nordlicht,PG-7,NR-PG-0042,1.0' does not match expect_id 'ACME'",
            "pulser: calibration was due 2027-06-30 (1 days ago)",
        ]
    assert links["pulser"].closed and links["bias"].closed


def test_open_bench_closes_what_it_opened_when_one_role_fails(tmp_path):
    spec = load_bench(write(tmp_path, GOOD))
    first = ScriptedTransport(address="P").expect(IDN)

    def opener(inst):
        if inst.role == "bias":
            raise ConnectionRefused("connection refused", address=inst.address)
        return first

    with pytest.raises(ConnectionRefused):
        open_bench(spec, opener=opener)
    assert first.closed


def test_open_bench_scope_role_sends_its_format_once(tmp_path):
    spec = load_bench(write(tmp_path, 'bench: b\ninstruments:\n  scope: {address: "S"}\n'))
    link = ScriptedTransport(address="S").expect(
        ("*IDN?", b"Nordlicht,DG-4,NR-DG-0001,2.0\n"),
        # the generic dialect joins each command and its error query into one message
        # (drivers/scpi/messages.py); the role's own FORMat:DATA equals the one sent at open and is
        # not sent again
        ("FORMat:BORDer NORMal;:SYSTem:ERRor:NEXT?", b'0,"No error"\n'),
        ("FORMat:DATA INTeger,16;:SYSTem:ERRor:NEXT?", b'0,"No error"\n'),
    )
    with open_bench(spec, opener=lambda inst: link) as bench:
        assert bench.scope is not None
    link.assert_done()


def test_describe_bench_reports_each_instrument_even_when_one_fails(tmp_path):
    spec = load_bench(write(tmp_path, GOOD))

    def opener(inst):
        if inst.role == "bias":
            raise ConnectionRefused("connection refused", address=inst.address)
        return ScriptedTransport(address=inst.address).expect(IDN)

    reports = describe_bench(spec, dt.date(2028, 1, 1), opener=opener)
    assert [r.role for r in reports] == ["pulser", "bias"]
    assert reports[0].identity.serial == "NR-PG-0042" and reports[0].ok
    assert reports[0].warnings == (
        "pulser: calibration was due 2027-06-30 (185 days ago)",
    )  # Jul-Dec 2027 (31+31+30+31+30+31) + 1
    assert not reports[1].ok and "5029" in reports[1].error
    lines = format_reports(reports)
    assert lines[0].startswith("pulser  TCPIP0::127.0.0.1::5025::SOCKET  Nordlicht PG-7")
    assert any(line.startswith("warning: bias: not reachable") for line in lines)


# -- visa_library: named backends only, a library path needs the command line's permission -----
# (issue 19 item 4: a bench file alone must never choose native code for pyvisa to load)


@pytest.mark.parametrize("backend", ["@py", "@ivi", "@sim"])
def test_named_visa_backends_are_accepted(tmp_path, backend):
    spec = load_bench(write(tmp_path, f'bench: b\ninstruments:\n  pulser: {{address: "A", visa_library: "{backend}"}}\n'))
    assert spec.instruments["pulser"].visa_library == backend


@pytest.mark.parametrize("library", ["/tmp/evil.so", "./libvisa.so", "/opt/visa/libvisa.so@ivi", "py"])
def test_visa_library_path_from_the_file_alone_is_refused_located(tmp_path, library):
    found = problems(
        tmp_path, f'bench: b\ninstruments:\n  pulser: {{address: "A", visa_library: "{library}"}}\n'
    )
    assert len(found) == 1, found
    assert found[0].startswith("bench.yaml:3:40: pulser: visa_library ")
    assert "not a named backend" in found[0] and "--allow-visa-library" in found[0]


def test_visa_library_path_allowed_by_the_caller_is_kept(tmp_path):
    lib = tmp_path / "lib" / "libvisa.so"
    text = f'bench: b\ninstruments:\n  pulser: {{address: "A", visa_library: "{lib}@ivi"}}\n'
    spec = load_bench(write(tmp_path, text), allowed_visa_libraries=[str(lib)])
    assert spec.instruments["pulser"].visa_library == f"{lib}@ivi"
    # allowing another library does not allow this one
    with pytest.raises(ConfigError):
        load_bench(write(tmp_path, text), allowed_visa_libraries=[str(tmp_path / "other.so")])


@pytest.mark.parametrize(
    ("value", "char"),
    [("TCPIP0::127.0.0.1::5025::SOCKET\\n*RST", "\\n"), ("A\\x00B", "\\x00"), ("A\\u0085B", "\\x85")],
)
def test_control_characters_in_an_address_are_refused_located(tmp_path, value, char):
    found = problems(tmp_path, f'bench: b\ninstruments:\n  pulser: {{address: "{value}"}}\n')
    assert len(found) == 1 and found[0].startswith("bench.yaml:3:21: pulser: address holds the control")
    assert repr(char.encode().decode("unicode_escape")) in found[0]


def test_a_role_the_bench_lacks_is_located_at_instruments(tmp_path):
    # issue 22: reported at bench.yaml:1:1 before; the place to add the role is under instruments:
    spec = load_bench(write(tmp_path, GOOD))
    with pytest.raises(ConfigError) as exc:
        open_bench(spec, roles=["scope"], opener=lambda inst: pytest.fail("nothing may be opened"))
    (problem,) = exc.value.problems
    assert (problem.location.line, problem.location.column) == (2, 1)
    assert "'scope: {address: ..., dialect: generic}' under instruments:" in problem.message


def test_bench_keys_are_located_by_role_and_key(tmp_path):
    spec = load_bench(write(tmp_path, GOOD))
    # line 4 of GOOD: `  bias:   {... max_volts: 60, ...}`; columns count from 1 (yaml marks from 0)
    line = GOOD.splitlines()[3]
    volts = spec.where("bias", "max_volts")
    assert (volts.line, volts.column) == (4, line.index("60") + 1)
    assert spec.where("bias", "max_current_uA") == spec.where("bias")  # not written: the role
    assert (spec.where("bias").line, spec.where("bias").column) == (4, 3)
    assert spec.where("scope") == spec.where()  # no such role: the instruments key


def test_the_calibration_date_is_read_and_checked_against_the_due_date(tmp_path):
    # issue 16: certificates print each instrument's calibration date beside its due date
    text = GOOD.replace("calibration_due: 2027-06-30", "calibrated: 2026-06-30, calibration_due: 2027-06-30")
    spec = load_bench(write(tmp_path, text))
    assert spec.instruments["pulser"].calibrated == dt.date(2026, 6, 30)
    assert spec.instruments["bias"].calibrated is None
    found = problems(tmp_path, GOOD.replace("calibration_due: 2027-06-30",
                                            "calibrated: 2027-07-01, calibration_due: 2027-06-30"))
    line = textwrap.dedent(GOOD).splitlines()[2].replace(
        "calibration_due: 2027-06-30", "calibrated: 2027-07-01, calibration_due: 2027-06-30")
    column = line.index("2027-07-01") + 1  # the located value of `calibrated`
    assert found == [f"bench.yaml:3:{column}: pulser: calibrated 2027-07-01 is after calibration_due 2027-06-30"]


def test_a_calibration_date_after_today_is_not_trusted():
    from drivers.bench import InstrumentSpec

    spec = InstrumentSpec(role="scope", address="A", calibrated=dt.date(2026, 3, 2),
                          calibration_due=dt.date(2027, 3, 2))
    assert instrument_warnings(spec, None, dt.date(2026, 3, 1)) == [
        "scope: calibrated 2026-03-02 is after today 2026-03-01"
    ]
    assert instrument_warnings(spec, None, dt.date(2026, 3, 2)) == []  # calibrated today is fine

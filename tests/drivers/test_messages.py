"""Fewer round trips (drivers/scpi/messages.py) over the scripted transport: the exact messages.

Message syntax checked against IEEE 488.2 §7.3 (program message units separated by ';') and
SCPI-1999 vol. 1 §6.2.4 (a unit starting with ':' is read from the root of the tree); both clause
numbers from memory.  The instrument side is the scripted link: every message is asserted.
"""

from __future__ import annotations

import pytest

from drivers.errors import InstrumentError, InstrumentTimeout
from drivers.scpi.messages import MessagePolicy, absolute, join_units
from drivers.scpi.session import ScpiSession
from tests.drivers.scripted import ERRQ, OK, ScriptedTransport, configured, resync

ALL = MessagePolicy(skip_unchanged=True, join=True, errors_per_group=True)
JOINED_OK = b'0,"No error"\n'


def test_units_after_the_first_are_read_from_the_root():
    # SCPI-1999 §6.2.4 (from memory): ':' resets the header path; common commands stand alone
    assert join_units(["SENS:SWE:POIN 400", "SENS:SWE:SRAT 1e9", "*WAI"]) == (
        "SENS:SWE:POIN 400;:SENS:SWE:SRAT 1e9;*WAI"
    )
    assert absolute(":OUTP ON") == ":OUTP ON" and absolute("OUTP ON") == ":OUTP ON"
    with pytest.raises(ValueError, match="line break"):
        join_units(["A 1", "B 2\nC 3"])
    with pytest.raises(ValueError, match="no command"):
        join_units([" "])


def test_plain_policy_sends_each_command_and_its_error_query_apart():
    link = ScriptedTransport().expect(configured("A 1"), configured("A 1"))
    s = ScpiSession(link)
    s.write("A 1")
    s.write("A 1")
    link.assert_done()
    assert s.messages == 4 and s.skipped == 0


def test_an_unchanged_setting_is_not_sent_again_and_the_error_query_joins_its_command():
    link = ScriptedTransport().expect(
        (f"A 1;:{ERRQ}", JOINED_OK),
        (f"A 2;:{ERRQ}", JOINED_OK),
        (f"B 1;:{ERRQ}", JOINED_OK),
    )
    s = ScpiSession(link, policy=ALL)
    s.write("A 1")
    s.write("A 1")  # known: skipped
    s.write("A 2")
    s.write("B 1")
    s.write("A 2")  # still known
    link.assert_done()
    assert s.messages == 3 and s.skipped == 2


def test_actions_and_untracked_writes_are_always_sent():
    link = ScriptedTransport().expect(
        (f"INIT;:{ERRQ}", JOINED_OK),
        (f"INIT;:{ERRQ}", JOINED_OK),
        (f"VOLT 5;:{ERRQ}", JOINED_OK),
        (f"VOLT 5;:{ERRQ}", JOINED_OK),
    )
    s = ScpiSession(link, policy=ALL)
    s.write("INIT", reapply=False)
    s.write("INIT", reapply=False)
    s.write("VOLT 5", track=False)  # what a bias supply sends: never skipped
    s.write("VOLT 5", track=False)
    link.assert_done()


def test_reset_error_and_resync_forget_what_the_instrument_holds():
    link = ScriptedTransport().expect(
        (f"A 1;:{ERRQ}", JOINED_OK),
        (f"*RST;:{ERRQ}", JOINED_OK),
        (f"A 1;:{ERRQ}", JOINED_OK),  # sent again after *RST
        (f"B 9;:{ERRQ}", b'-222,"Data out of range"\n'),
        (ERRQ, OK),
        (f"A 1;:{ERRQ}", JOINED_OK),  # sent again after an error
        (f"C 1;:{ERRQ}", InstrumentTimeout("scripted silence", address="SCRIPT::1")),
        *resync(),
        (f"C 1;:{ERRQ}", JOINED_OK),  # the retry after the resync
        (f"A 1;:{ERRQ}", JOINED_OK),  # sent again after a timeout
    )
    s = ScpiSession(link, policy=ALL)
    s.write("A 1")
    s.write("*RST", reapply=False)
    s.write("A 1")
    with pytest.raises(InstrumentError) as caught:
        s.write("B 9")
    assert caught.value.code == -222
    s.write("A 1")
    s.write("C 1")
    s.write("A 1")
    link.assert_done()


def test_a_reconnect_forgets_and_reapplies():
    from drivers.errors import ConnectionClosed

    link = ScriptedTransport().expect(
        (f"A 1;:{ERRQ}", JOINED_OK),
        (f"B 1;:{ERRQ}", ConnectionClosed("dropped", address="SCRIPT::1")),
        *resync(),
        (f"A 1;:{ERRQ}", JOINED_OK),  # re-applied after the reconnect
        (f"B 1;:{ERRQ}", JOINED_OK),  # the retried command
        (f"A 1;:{ERRQ}", JOINED_OK),  # not skipped: the reconnect made it unknown
    )
    s = ScpiSession(link, policy=ALL)
    s.write("A 1")
    s.write("B 1")
    s.write("A 1")
    link.assert_done()
    assert s.reconnects == 1


def test_a_group_goes_out_as_one_message_with_one_error_query():
    link = ScriptedTransport().expect(
        (f"SENS:SWE:POIN 400;:SENS:SWE:SRAT 1e9;:INIT;:{ERRQ}", JOINED_OK),
        (f"SENS:SWE:SRAT 2e9;:{ERRQ}", JOINED_OK),  # POIN unchanged: only the rate
    )
    s = ScpiSession(link, policy=ALL)
    with s.group():
        s.write("SENS:SWE:POIN 400")
        s.write("SENS:SWE:SRAT 1e9")
        s.write("INIT", reapply=False)
    with s.group():
        s.write("SENS:SWE:POIN 400")
        s.write("SENS:SWE:SRAT 2e9")
    link.assert_done()
    assert s.messages == 2 and s.skipped == 1


def test_an_error_in_a_group_names_the_group_and_drains_the_queue():
    link = ScriptedTransport().expect(
        (f"A 1;:B 2;:{ERRQ}", b'-224,"Illegal parameter value"\n'),
        (ERRQ, b'-221,"Settings conflict"\n'),
        (ERRQ, OK),
        (f"A 1;:{ERRQ}", JOINED_OK),  # nothing known after the error
    )
    s = ScpiSession(link, policy=ALL)
    with pytest.raises(InstrumentError) as caught, s.group():
        s.write("A 1")
        s.write("B 2")
    assert caught.value.code == -224 and caught.value.command == "A 1;:B 2"
    assert caught.value.queued == [(-224, "Illegal parameter value"), (-221, "Settings conflict")]
    s.write("A 1")
    link.assert_done()


def test_without_joining_a_group_is_checked_once_at_its_end():
    link = ScriptedTransport().expect(("A 1", None), ("B 2", None), (ERRQ, OK))
    s = ScpiSession(link, policy=MessagePolicy(errors_per_group=True))
    with s.group():
        s.write("A 1")
        s.write("B 2")
    link.assert_done()


def test_a_query_inside_a_group_goes_after_the_writes_held_so_far():
    link = ScriptedTransport().expect(
        (f"A 1;:{ERRQ}", JOINED_OK), ("A?", b"1\n"), (f"B 2;:{ERRQ}", JOINED_OK)
    )
    s = ScpiSession(link, policy=ALL)
    with s.group():
        s.write("A 1")
        assert s.query("A?") == "1"
        s.write("B 2")
    link.assert_done()


def test_a_group_whose_body_fails_sends_nothing():
    link = ScriptedTransport()
    s = ScpiSession(link, policy=ALL)
    with pytest.raises(ValueError, match="bad"), s.group():
        s.write("A 1")
        raise ValueError("bad argument")
    link.assert_done()
    assert link.writes == []


# -- roles and the dialect ------------------------------------------------------------------------
def _role(cls, link: ScriptedTransport, **spec):
    from drivers.bench import InstrumentSpec
    from drivers.dialect import load_dialect

    generic = load_dialect("generic")
    return cls(ScpiSession(link, policy=generic.messages), generic,
               InstrumentSpec(role=cls.role, address=link.address, **spec))  # fmt: skip


def test_the_generic_dialect_allows_every_saving_and_a_lab_file_may_refuse_them():
    from drivers.dialect import load_dialect, parse_dialect
    from drivers.errors import ConfigError

    assert load_dialect("generic").messages == ALL
    # the other shipped dialects say nothing: plain messages
    assert load_dialect("wavescope").messages == MessagePolicy()
    text = "dialect: x\nformat: 2\nmessages: {join: true}\nroles: {}\n"
    assert parse_dialect(text, "x.yaml").messages == MessagePolicy(join=True)
    with pytest.raises(ConfigError) as caught:
        parse_dialect(
            "dialect: x\nformat: 2\nmessages: {join: 1, batch: true}\nroles: {}\n", "x.yaml"
        )
    text = str(caught.value)
    assert "x.yaml:3:" in text and "'messages.join:' must be true or false" in text
    assert "unknown key of messages 'batch'" in text


def test_a_bias_supply_sends_every_setting_however_often():
    from drivers.roles import BiasSupply

    link = ScriptedTransport().expect(
        *[
            (f"{c};:{ERRQ}", JOINED_OK)
            for c in ("SOURce:CURRent:LIMit 5e-06", "SOURce:CURRent:LIMit 5e-06",
                      "OUTPut:STATe OFF", "OUTPut:STATe OFF")
        ]
    )  # fmt: skip
    supply = _role(BiasSupply, link, max_volts=60.0, max_ramp_V_per_s=5.0, max_current_uA=10.0)
    supply.set_current_limit(5.0)
    supply.set_current_limit(5.0)
    supply.set_output(False)
    supply.set_output(False)
    link.assert_done()


def test_a_pulser_output_off_is_always_sent_and_unchanged_amplitudes_are_not():
    from drivers.roles import Pulser

    link = ScriptedTransport().expect(
        (f"SOURce:VOLTage:LEVel:IMMediate:AMPLitude 0.02;:{ERRQ}", JOINED_OK),
        (f"OUTPut:STATe OFF;:{ERRQ}", JOINED_OK),
        (f"OUTPut:STATe OFF;:{ERRQ}", JOINED_OK),
    )
    pulser = _role(Pulser, link)
    pulser.set_amplitude(mV=20.0)
    pulser.set_amplitude(mV=20.0)
    pulser.set_output(False)
    pulser.set_output(False)
    link.assert_done()


def test_a_raw_switch_command_makes_the_routes_unknown():
    from drivers.roles import Switch

    route = (f"ROUTe:CLOSe (@1101);:{ERRQ}", JOINED_OK)
    link = ScriptedTransport().expect(
        route, (f"ROUTe:OPEN (@1101);:{ERRQ}", JOINED_OK), route,
        (f"ROUTe:OPEN:ALL;:{ERRQ}", JOINED_OK), route,
    )  # fmt: skip
    switch = _role(Switch, link)
    switch.route(1, "x1", 1)
    switch.route(1, "x1", 1)  # skipped
    switch.open_channels([1101])
    switch.route(1, "x1", 1)  # sent: the open undid it
    switch.open_all()
    switch.route(1, "x1", 1)
    link.assert_done()


def test_a_counter_starts_counts_and_checks_in_one_message():
    from drivers.errors import InstrumentError as Refused
    from drivers.roles import Counter

    joined = f"INITiate:IMMediate;:FETCh:TOTalize?;:{ERRQ}"
    link = ScriptedTransport().expect(
        (f"SENSe:GATE:TIME 0.05;:{ERRQ}", JOINED_OK),
        (f"ROUTe:TERMinals:CHANnel 3;:{ERRQ}", JOINED_OK),
        (joined, b'+412;0,"No error"\n'),
        (joined, b'+7;-213,"Init ignored; busy"\n'),  # a ';' inside the quoted message
        (ERRQ, OK),
        (f"ROUTe:TERMinals:CHANnel 3;:{ERRQ}", JOINED_OK),  # forgotten after the error
        (joined, b'+9;0,"No error"\n'),
    )
    counter = _role(Counter, link)
    counter.set_gate(0.05)
    assert counter.count(3) == 412
    with pytest.raises(Refused) as caught:
        counter.count(3)
    assert caught.value.code == -213 and caught.value.command == joined
    assert counter.count(3) == 9
    link.assert_done()


def test_a_reply_with_one_response_where_two_were_asked_is_garbled():
    from drivers.errors import ProtocolError
    from drivers.scpi.joined import split_last_unit

    assert split_last_unit('12;0,"No error"') == ("12", '0,"No error"')
    assert split_last_unit('1;2;-100,"a;b"') == ("1;2", '-100,"a;b"')
    with pytest.raises(ProtocolError, match="one response"):
        split_last_unit('0,"No error"')


def test_the_last_unit_is_cut_where_a_character_by_character_reading_cuts_it():
    """The split counts quotes with ``str.count``; the reading it must agree with walks the reply
    one character at a time, turning 'inside quotes' on and off at each ``"`` (IEEE 488.2 string
    response data, ``""`` for a quote inside; from memory)."""
    import random

    from drivers.errors import ProtocolError
    from drivers.scpi.joined import split_last_unit

    def walked(reply: str) -> tuple[str, str] | None:
        quoted, cut = False, -1
        for i, c in enumerate(reply):
            if c == '"':
                quoted = not quoted
            elif c == ";" and not quoted:
                cut = i
        return None if cut < 0 else (reply[:cut].strip(), reply[cut + 1 :].strip())

    rng = random.Random(7)
    replies = ['1;0,"No error"', '"a;b";"c""d;e"', '"x;', ';', '";"', '1;-222,"Data ""out;"" range"']
    replies += ["".join(rng.choice('a;" ,0') for _ in range(rng.randrange(12))) for _ in range(3000)]
    for reply in replies:
        expected = walked(reply)
        if expected is None:
            with pytest.raises(ProtocolError):
                split_last_unit(reply)
        else:
            assert split_last_unit(reply) == expected, reply


def test_a_garbled_joined_reply_says_so():
    from drivers.errors import ProtocolError
    from drivers.roles import Counter

    joined = f"INITiate:IMMediate;:FETCh:TOTalize?;:{ERRQ}"
    link = ScriptedTransport().expect(
        (f"SENSe:GATE:TIME 0.05;:{ERRQ}", JOINED_OK),
        (f"ROUTe:TERMinals:CHANnel 1;:{ERRQ}", JOINED_OK),
        (joined, b"\x15?!kajvx\n"),
    )
    counter = _role(Counter, link)
    counter.set_gate(0.05)
    with pytest.raises(ProtocolError, match="garbled reply") as caught:
        counter.count(1)
    assert caught.value.command == joined


def test_a_scope_starts_waits_and_checks_in_one_message():
    from drivers.errors import ProtocolError
    from drivers.roles import Scope

    joined = f"INITiate:IMMediate;*OPC?;:{ERRQ}"
    link = ScriptedTransport().expect(
        ("FORMat:BORDer NORMal;:" + ERRQ, JOINED_OK),
        ("FORMat:DATA INTeger,16;:" + ERRQ, JOINED_OK),
        (joined, b'1;0,"No error"\n'),
        (joined, b'0;0,"No error"\n'),  # *OPC? must say 1
    )
    scope = _role(Scope, link)
    scope.acquire()
    with pytest.raises(ProtocolError, match="expected 1"):
        scope.acquire()
    link.assert_done()
    assert link.timeouts_at_write[2] == scope.session.opc_timeout_ms  # it waits for the acquisition

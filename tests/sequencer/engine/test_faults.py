"""The one-line abort text for instrument faults (sequencer/engine/faults.py): instrument role and
address, the command, and -- when the link failed on the error-queue check that follows a
configuring command -- that command rather than the check."""

from __future__ import annotations

import pytest

from drivers.benchfile import InstrumentSpec
from drivers.errors import ConnectionClosed, InstrumentTimeout
from sequencer.engine.faults import describe_fault

SCOPE = "TCPIP0::127.0.0.1::5026::SOCKET"
INSTRUMENTS = {"scope": InstrumentSpec(role="scope", address=SCOPE, timeout_ms=5000)}


def test_closed_while_sending_names_the_command():
    exc = ConnectionClosed("peer closed", address=SCOPE, command="TRACe:DATA? CHANnel1")
    assert describe_fault(exc, INSTRUMENTS) == (
        f"scope at {SCOPE}: connection closed by the instrument (sending 'TRACe:DATA? CHANnel1')"
    )


@pytest.mark.parametrize(
    ("error", "expected"),
    [
        (ConnectionClosed, "connection closed by the instrument (checking the error queue after "
         "'INITiate:IMMediate')"),
        (InstrumentTimeout, "no reply to the error-queue check after 'INITiate:IMMediate' within "
         "5000 ms"),
    ],
)
def test_a_failed_error_check_names_the_command_before_it(error, expected):
    exc = error("link failed", address=SCOPE, command="SYSTem:ERRor:NEXT?")
    text = describe_fault(exc.checking_after("INITiate:IMMediate"), INSTRUMENTS)
    assert text == f"scope at {SCOPE}: {expected}"


def test_every_fault_kind_says_the_address_once():
    # one base (drivers.errors.InstrumentFault) carries address and command; the line says them
    # once, whatever the kind (a backend failure, a garbled reply, a runaway ramp)
    from drivers.errors import ProtocolError, RampRunaway, TransportError

    for exc in (
        TransportError("VISA backend failed (KeyError: 'x')", address=SCOPE, command="*IDN?"),
        ProtocolError("garbled reply 'x1'", address=SCOPE, command="MEASure:VOLTage:DC?"),
        RampRunaway(f"bias at {SCOPE}: read-back ahead of the commanded ramp", address=SCOPE),
    ):
        assert describe_fault(exc, INSTRUMENTS).count(SCOPE) == 1, describe_fault(exc, INSTRUMENTS)
    assert TransportError("x", address=SCOPE).at_step("gain/ch1").step_path == "gain/ch1"

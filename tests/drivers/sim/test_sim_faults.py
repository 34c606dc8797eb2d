"""Injected faults of the board file (no_reply, disconnect, garbled_reply, scpi_error; interlock_open
is in test_sim_bias.py), seen by a plain pyvisa-py client over real sockets."""

from __future__ import annotations

import time

import pytest
import pyvisa

from drivers.sim import MAKER
from tests.drivers.sim.simkit import make_board, open_role


def test_no_reply_after_n_commands(bench_of):
    s = bench_of(make_board(faults=[{"kind": "no_reply", "role": "counter", "after_commands": 2}]))
    counter = s.counter
    counter.timeout = 300
    assert counter.query("*IDN?").startswith(MAKER)  # message 1 (query = 1 message)
    assert counter.query("SYST:ERR?") == '0,"No error"'  # message 2
    t = time.perf_counter()
    with pytest.raises(pyvisa.errors.VisaIOError) as exc:
        counter.query("*IDN?")
    assert exc.value.error_code == pyvisa.constants.StatusCode.error_timeout
    assert time.perf_counter() - t >= 0.25
    with pytest.raises(pyvisa.errors.VisaIOError):
        counter.query("*IDN?")  # it stays silent
    assert s.scope.query("*IDN?").startswith(MAKER)  # other instruments are unaffected


def test_disconnect_closes_the_socket_once(bench_of, rm):
    s = bench_of(make_board(faults=[{"kind": "disconnect", "role": "pulser", "after_commands": 1}]))
    pulser = s.pulser
    pulser.timeout = 1000
    assert pulser.query("*IDN?").startswith(MAKER)
    with pytest.raises(pyvisa.errors.VisaIOError):
        pulser.query("*IDN?")  # the server closed the connection instead of answering
    again = open_role(rm, s.bench, "pulser")
    try:
        assert again.query("*IDN?").startswith(MAKER)  # a new connection works
    finally:
        again.close()


def test_garbled_reply_once(bench_of):
    s = bench_of(
        make_board(faults=[{"kind": "garbled_reply", "after_commands": 1}])
    )  # default role: scope
    scope = s.scope
    good = scope.query("*IDN?")
    bad = scope.query("*IDN?")
    assert bad != good and len(bad.split(",")) != 4
    assert not bad.isprintable()  # a control byte: no parser takes it for a value
    assert scope.query("*IDN?") == good  # only one reply is garbled


def test_garbled_block_has_no_valid_header(bench_of):
    s = bench_of(
        make_board(faults=[{"kind": "garbled_reply", "role": "scope", "after_commands": 2}])
    )
    scope = s.scope
    scope.write("INIT")
    scope.query("*OPC?")
    scope.write("TRAC:DATA? CHAN1")
    raw = scope.read_raw()
    assert not raw.startswith(b"#") and raw.endswith(b"\n")


def test_scpi_error_pushes_the_given_code(bench_of):
    board = make_board(
        faults=[
            {"kind": "scpi_error", "role": "bias", "after_commands": 1, "code": -310},
            {"kind": "scpi_error", "role": "switch", "code": 123, "message": "Relay stuck"},
        ]
    )
    s = bench_of(board)
    assert s.bias.query("SYST:ERR?") == '0,"No error"'
    assert s.bias.query("SYST:ERR?") == '-310,"System error"'  # SCPI-1999 standard text
    assert s.bias.query("SYST:ERR?") == '0,"No error"'
    assert s.switch.query("SYST:ERR?") == '123,"Relay stuck"'


def test_after_s_counts_from_the_first_message(bench_of):
    s = bench_of(
        make_board(
            faults=[{"kind": "scpi_error", "role": "threshold", "after_s": 0.2, "code": -300}]
        )
    )
    assert s.threshold.query("SYST:ERR?") == '0,"No error"'
    time.sleep(0.25)
    assert s.threshold.query("SYST:ERR?") == '-300,"Device-specific error"'


def test_link_down_from_a_given_message_until_lifted(bench_of, rm):
    # counted from the first message starting with "OUTP" (case-insensitive): that message + 1
    faults = [{"kind": "link_down", "role": "pulser", "after_message": "outp", "after_commands": 1}]
    s = bench_of(make_board(faults=faults))
    pulser = s.pulser
    pulser.timeout = 1000
    for _ in range(3):  # messages before the marker do not count
        assert pulser.query("*IDN?").startswith(MAKER)
    assert pulser.query("OUTPut:STATe?") in ("0", "1")  # the marker itself: 1 of 1 allowed
    with pytest.raises(pyvisa.errors.VisaIOError):
        pulser.query("*IDN?")  # the link goes down here ...
    again = open_role(rm, s.bench, "pulser")
    again.timeout = 1000
    try:
        with pytest.raises(pyvisa.errors.VisaIOError):
            again.query("*IDN?")  # ... and stays down: a new connection's first message drops it
    finally:
        again.close()
    s.bench.restore_link("pulser")
    back = open_role(rm, s.bench, "pulser")
    try:
        assert back.query("*IDN?").startswith(MAKER)
    finally:
        back.close()

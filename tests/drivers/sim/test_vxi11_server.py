"""The simulator's VXI-11 core channel, checked with pyvisa-py's own VXI-11 client (the outside
reference: ``pyvisa_py.tcpip.Vxi11CoreClient`` packs the calls and unpacks the replies exactly as it
does against a real instrument) and the rules of VXI-11 rev 1.0 (B.6, from memory):

* a read with the TERMCHAR_SET flag (0x80) ends after the term character with reason CHR (0x02);
  the last byte of the reply carries END (0x04); a shorter request ends with REQCNT (0x01);
* a call on an unknown link id answers error 4 (invalid link identifier);
* a program other than the core channel is refused as PROG_UNAVAIL (ONC RPC, RFC 5531 §9).
"""

from __future__ import annotations

import threading

import pytest
from pyvisa_py.protocols import rpc, vxi11
from pyvisa_py.tcpip import Vxi11CoreClient

from drivers.sim.faults import FaultRunner
from drivers.sim.instrument import SimInstrument, command
from drivers.sim.server import InstrumentServer
from drivers.sim.vxi11 import Vxi11Server

TERMCHAR_SET, END = 0x80, 0x08  # VXI-11 B.6.3 operation flags
REQCNT, CHR, REASON_END = 0x01, 0x02, 0x04  # VXI-11 B.6.12 read reasons


class Lines(SimInstrument):
    role = "scope"
    model = "LINES-1"

    def commands(self):
        return [command("TWO", query=lambda c: b"ab\ncd")]  # sent with its terminator: ab\ncd\n


@pytest.fixture
def core():
    server = InstrumentServer(
        Lines(instrument_id=1, serial="L-1"),
        lock=threading.Lock(),
        faults=FaultRunner((), lambda: 0.0),
    )
    front = Vxi11Server(server)
    front.start()
    client = Vxi11CoreClient("127.0.0.1", front.port, 2000)
    try:
        yield client
    finally:
        client.close()
        front.stop()
        server.stop()


def test_a_read_ends_at_the_term_character_only_when_asked(core):
    error, link, _abort, max_recv = core.create_link(7, 0, 0, "inst0")
    assert error == 0 and max_recv > 0
    assert core.device_write(link, 1000, 0, END, b"TWO?\n") == (0, 5)
    # asked to stop at '\n': the first line, reason CHR, END not yet
    assert core.device_read(link, 1024, 1000, 0, TERMCHAR_SET, ord("\n")) == (0, CHR, b"ab\n")
    # the rest: its last byte is the message's end, which is also the term character
    assert core.device_read(link, 1024, 1000, 0, TERMCHAR_SET, ord("\n")) == (
        0,
        CHR | REASON_END,
        b"cd\n",
    )
    assert core.device_write(link, 1000, 0, END, b"TWO?\n") == (0, 5)
    assert core.device_read(link, 4, 1000, 0, 0, 0) == (0, REQCNT, b"ab\nc")  # request count
    assert core.device_read(link, 1024, 1000, 0, 0, 0) == (0, REASON_END, b"d\n")  # no termchar
    assert core.destroy_link(link) == 0


def test_an_unknown_link_is_refused(core):
    assert (
        core.device_write(12345, 1000, 0, END, b"*IDN?\n")[0]
        == vxi11.ErrorCodes.invalid_link_identifier
    )
    assert core.destroy_link(12345) == vxi11.ErrorCodes.invalid_link_identifier


def test_a_message_without_end_waits_for_the_rest(core):
    _error, link, _abort, _max = core.create_link(7, 0, 0, "inst0")
    assert core.device_write(link, 1000, 0, 0, b"*ID")[0] == 0
    assert core.device_write(link, 1000, 0, END, b"N?\n")[0] == 0
    error, reason, data = core.device_read(link, 1024, 1000, 0, 0, 0)
    assert (error, reason) == (0, REASON_END) and data.startswith(
        b"Larchmoor Test Systems (sim),LINES-1"
    )
    # nothing pending: the device waits its I/O timeout and says so (error 15)
    assert core.device_read(link, 1024, 50, 0, 0, 0)[0] == vxi11.ErrorCodes.io_timeout


def test_another_program_is_unavailable(core):
    other = rpc.RawTCPClient("127.0.0.1", 0x0607B0, 1, core.port)  # the abort channel's program
    other.packer, other.unpacker = rpc.Packer(), rpc.Unpacker(b"")
    try:
        with pytest.raises(rpc.RPCUnpackError, match="program_unavailable"):
            other.make_call(1, None, lambda _args: None, None)
    finally:
        other.close()

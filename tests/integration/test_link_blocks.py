"""A short or malformed binary block over every link kind (raw socket, HiSLIP, VXI-11) is refused,
and the session drains and resynchronises before the next command, which then gets its own reply.

Block syntax from IEEE 488.2 §8.7.9 (definite length ``#<n><n digits><data>``, from memory): a block
announcing 1000 bytes that delivers 500 is short; a header whose second byte is not a digit is
malformed.  Every read has a deadline (the link timeout, 1 s here): the short block ends as a
timeout, never a hang.
"""

from __future__ import annotations

import threading

import pytest

from drivers.errors import InstrumentTimeout, ProtocolError
from drivers.scpi.session import ScpiSession
from drivers.sim.faults import FaultRunner
from drivers.sim.hislip import HislipServer
from drivers.sim.instrument import SimInstrument, command
from drivers.sim.server import InstrumentServer
from drivers.sim.vxi11 import Vxi11Server
from drivers.transport import VisaTransport

GOOD = bytes(range(256)) * 4  # holds newline bytes


class BadBlocks(SimInstrument):
    """``SHORT?``: #41000 with 500 data bytes; ``BAD?``: '#Z' and junk; ``GOOD?``: a whole block."""

    role = "scope"
    model = "BLOCKS-2"

    def commands(self):
        return [
            command("SHORT", query=lambda c: b"#41000" + GOOD[:500]),
            command("BAD", query=lambda c: b"#Z17\n" + GOOD[:300]),
            command("GOOD", query=lambda c: b"#41024" + GOOD),
        ]


def _serve(link: str):
    server = InstrumentServer(
        BadBlocks(instrument_id=1, serial="BB-1"),
        lock=threading.Lock(),
        faults=FaultRunner((), lambda: 0.0),
    )
    server.start()
    front = None
    if link == "hislip":
        front = HislipServer(server)
        front.start()
        address = f"TCPIP0::127.0.0.1::hislip0,{front.port}::INSTR"
    elif link == "vxi11":
        front = Vxi11Server(server)
        front.start()
        address = f"TCPIP0::127.0.0.1,{front.port}::inst0::INSTR"
    else:
        address = f"TCPIP0::127.0.0.1::{server.port}::SOCKET"

    def stop() -> None:
        if front is not None:
            front.stop()
        server.stop()

    return stop, address


# a raw socket has no end-of-message mark: a short block is a timeout there; an INSTR link says
# where the message ended, so the block is known short at once
FAILURES = {
    ("SHORT?", "socket"): InstrumentTimeout,
    ("SHORT?", "hislip"): ProtocolError,
    ("SHORT?", "vxi11"): ProtocolError,
    ("BAD?", "socket"): ProtocolError,
    ("BAD?", "hislip"): ProtocolError,
    ("BAD?", "vxi11"): ProtocolError,
}


@pytest.mark.parametrize(("query", "link"), sorted(FAILURES))
def test_a_bad_block_resynchronises_the_session_before_the_next_command(query, link):
    failure = FAILURES[(query, link)]
    stop, address = _serve(link)
    try:
        with ScpiSession(VisaTransport.open(address, timeout_ms=1000)) as session:
            session.retries = 0  # the bad reply once, then the recovery before the next command
            with pytest.raises(failure):
                session.query_block_bytes(query)
            assert session.resyncs == 0  # recovery happens before the next command, not after
            # the next command gets its own reply, not the rest of the bad block
            assert session.query("*IDN?").startswith("Larchmoor Test Systems (sim),BLOCKS-2")
            assert session.resyncs == 1 and session.reconnects == 0
            assert session.query_block_bytes("GOOD?") == GOOD
            assert session.query("*OPC?") == "1"
    finally:
        stop()

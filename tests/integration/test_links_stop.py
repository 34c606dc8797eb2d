"""A stop request reaches a block read while the instrument is still acquiring, over every link
(issue 19: "every loop that waits (ramps, polls, reads) checks the stop flag"): raw socket, HiSLIP
and VXI-11 through pyvisa-py, the simulated instrument behind each.

The reply is held back -- the instrument is "acquiring" -- far beyond the moment the stop is asked
for; the link timeout is a minute.  A read that looked at the stop flag only between chunks would
wait for the reply and return it; this one ends with ``ReadStopped`` having received nothing.  The
order of events is asserted (stop asked, read given up, reply released after), never a duration.
For VXI-11 the wait is a one-byte ``device_read`` with a short io_timeout (drivers/instr_links.py):
a released reply then still arrives whole, the probed byte first (checked with a second query).
"""

from __future__ import annotations

import threading
from collections.abc import Callable

import numpy as np
import pytest

from drivers.errors import ReadStopped
from drivers.scpi.blocks import format_block
from drivers.scpi.joined import query_joined
from drivers.scpi.session import ScpiSession
from drivers.sim.faults import FaultRunner
from drivers.sim.hislip import HislipServer
from drivers.sim.instrument import SimInstrument, command
from drivers.sim.server import InstrumentServer
from drivers.sim.vxi11 import Vxi11Server
from drivers.transport import VisaTransport

RECORD = np.arange(500, dtype=np.int16)
REPLY = format_block(RECORD)  # IEEE 488.2 definite block (drivers.scpi.blocks, tested there)


class Acquiring(SimInstrument):
    """``DATA?`` answers only once ``released`` is set (the acquisition ends); ``QUICK?`` at once."""

    role = "scope"
    model = "ACQ-1"

    def __init__(self, **kw) -> None:
        super().__init__(**kw)
        self.released = threading.Event()
        self.defer = True  # the handler itself waits (socket, HiSLIP); VXI-11 defers in the server

    def commands(self):
        return [command("DATA", query=self._data), command("QUICK", query=lambda c: REPLY)]

    def common_commands(self):
        # *OPC? answers once the acquisition is over (IEEE 488.2 10.19), held back like DATA?
        return {"*OPC": (None, self._opc)}

    def _opc(self, _c) -> str:
        if self.defer:
            self.released.wait(60.0)
        return "1"

    def _data(self, _c) -> bytes:
        if self.defer:
            self.released.wait(60.0)  # a hang guard; the test releases it
        return REPLY


class DeferringVxi11(Vxi11Server):
    """VXI-11 runs a message when it is written; the reply to ``DATA?`` is handed to the link only
    once the instrument's acquisition is released (what a real device does while it acquires)."""

    def __init__(self, server: InstrumentServer, instrument: Acquiring) -> None:
        super().__init__(server)
        self.instrument = instrument

    def _run(self, link, message: bytes) -> None:
        if not message.upper().startswith((b"DATA?", b"*OPC?")) or self.instrument.released.is_set():
            super()._run(link, message)
            return
        _keep, reply = self.server.respond(message)

        def later() -> None:
            self.instrument.released.wait(60.0)
            link.output += reply or b""

        threading.Thread(target=later, daemon=True).start()


def serve(link: str):
    inst = Acquiring(instrument_id=1, serial="ACQ-0001")
    server = InstrumentServer(inst, lock=threading.Lock(), faults=FaultRunner((), lambda: 0.0))
    if link == "socket":
        server.start()
        return inst, server.stop, f"TCPIP0::127.0.0.1::{server.port}::SOCKET"
    if link == "hislip":
        front = HislipServer(server)
        address_of = lambda p: f"TCPIP0::127.0.0.1::hislip0,{p}::INSTR"  # noqa: E731
    else:
        inst.defer = False
        front = DeferringVxi11(server, inst)
        address_of = lambda p: f"TCPIP0::127.0.0.1,{p}::inst0::INSTR"  # noqa: E731
    front.start()

    def stop() -> None:
        front.stop()
        server.stop()

    return inst, stop, address_of(front.port)


def stopped_while_waiting(
    link: str, wait: Callable[[ScpiSession], object], match: str, *, timeout_ms: int
) -> list[str]:
    """``wait(session)`` on a reply the instrument holds back, a stop asked after 0.5 s (Ctrl-C
    while it acquires): the order of what happened; ``wait`` must raise ``ReadStopped`` (``match``)."""
    inst, stop, address = serve(link)
    order: list[str] = []
    pressed = threading.Event()

    def press() -> None:
        order.append("stop asked")
        pressed.set()

    try:
        with ScpiSession(VisaTransport.open(address, timeout_ms=timeout_ms)) as session:
            session.stop_check = pressed.is_set
            timer = threading.Timer(0.5, press)
            timer.start()
            try:
                with pytest.raises(ReadStopped, match=match):
                    wait(session)
                order.append("given up")
            finally:
                timer.cancel()
                inst.released.set()
                order.append("reply released")
        return order
    finally:
        inst.released.set()
        stop()


@pytest.mark.parametrize("link", ["socket", "hislip", "vxi11"])
def test_a_stop_request_ends_the_wait_for_a_reply_still_being_acquired(link):
    order = stopped_while_waiting(
        link,
        lambda session: session.query_block_bytes("DATA?", expected_bytes=RECORD.nbytes),
        "after 0 bytes",
        timeout_ms=60_000,
    )
    assert order == ["stop asked", "given up", "reply released"]


def test_over_vxi11_a_reply_whose_first_byte_was_probed_arrives_whole():
    # the wait takes the reply's first byte ('#') off the link; the read hands it out first
    inst, stop, address = serve("vxi11")
    inst.released.set()
    try:
        with ScpiSession(VisaTransport.open(address, timeout_ms=5_000)) as session:
            session.stop_check = lambda: False  # a run's stop flag, not pressed
            for query in ("QUICK?", "DATA?", "QUICK?"):
                data = session.query_block_bytes(query, expected_bytes=RECORD.nbytes)
                assert np.frombuffer(bytes(data), dtype=">i2").tolist() == RECORD.tolist()
            assert session.query("*OPC?") == "1"  # in step after the blocks
    finally:
        stop()


@pytest.mark.parametrize("link", ["socket", "hislip", "vxi11"])
def test_a_stop_request_ends_an_operation_complete_wait(link):
    # *OPC? while the instrument acquires, with a minute to wait: given up at the stop request
    order = stopped_while_waiting(
        link,
        lambda session: session.wait_complete(timeout_ms=60_000),
        "given up by a stop request",
        timeout_ms=5_000,
    )
    assert order == ["stop asked", "given up", "reply released"]


@pytest.mark.parametrize("link", ["socket", "hislip", "vxi11"])
def test_a_stop_request_ends_a_joined_acquisition_wait(link):
    # an acquisition started, *OPC? and the error check in one message (drivers/scpi/joined.py):
    # the joined reply waits for the acquisition and is given up at the stop request like *OPC?
    order = stopped_while_waiting(
        link,
        lambda session: query_joined(session, [], "*OPC?", str, timeout_ms=60_000),
        "given up by a stop request",
        timeout_ms=5_000,
    )
    assert order == ["stop asked", "given up", "reply released"]

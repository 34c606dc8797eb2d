"""Binary block reads bounded in size and time (issue 19, item 2), over real TCP sockets.

The instrument is the test responder behind the hostile proxy (tests/reliability/hostile.py): an
endless ``#0`` block, a newline flood, a header announcing 512 MiB and a slow trickle each end in an
error -- never in a read that runs until memory or patience ends -- and the link is usable after.
Block format: IEEE Std 488.2-1992 8.7.9 (definite ``#<n><len>``, indefinite ``#0`` ... NL+END;
clause from memory).  No wall-clock upper bound is asserted: the bounds show as the error raised,
the bytes the instrument was allowed to push, and the memory allocated.
"""

from __future__ import annotations

import threading
import tracemalloc

import numpy as np
import pytest

from drivers.errors import InstrumentTimeout, ProtocolError, ReadStopped, TransportError
from drivers.scpi.blockread import EXPECTED_MARGIN_BYTES, MAX_INDEFINITE_BYTES, block_cap
from drivers.scpi.blocks import format_block
from drivers.scpi.session import ScpiSession
from drivers.transport import VisaTransport
from tests.drivers.responder import Responder, SimpleInstrument
from tests.reliability.hostile import HostileProxy, Lie, endless, header_then_silence

both_paths = pytest.mark.parametrize("fast", [True, False], ids=["fast-path", "pyvisa-path"])
RECORD = np.arange(1000, dtype=np.int16)  # 2000 bytes as int16


@pytest.fixture
def instrument():
    inst = SimpleInstrument()
    inst.special["D?"] = lambda line, i: format_block(RECORD) + b"\n"
    with Responder(inst) as r:
        yield r


def session_through(proxy: HostileProxy, *, fast: bool = True, **kw) -> ScpiSession:
    link = VisaTransport.open(proxy.address, timeout_ms=300, socket_fast_path=fast)
    return ScpiSession(link, **kw)


def honest_after(s: ScpiSession, proxy: HostileProxy) -> None:
    """The lie is withdrawn: the next block read gets the real record (the link recovered)."""
    proxy.lies.clear()
    assert s.query_block("D?", expected_bytes=RECORD.nbytes).tolist() == RECORD.tolist()


def test_caps_from_the_expected_record_or_the_hard_cap():
    assert block_cap(2000, indefinite=False) == 2000 + EXPECTED_MARGIN_BYTES + 20
    assert block_cap(None, indefinite=True) == MAX_INDEFINITE_BYTES
    assert block_cap(None, indefinite=False, hard_cap=10_000) == 10_000
    assert block_cap(10**12, indefinite=False, hard_cap=10_000) == 10_000


@both_paths
def test_an_endless_indefinite_block_ends_at_the_expected_size(instrument, fast):
    lie = Lie("D?", endless(b"#0", bytes(range(256)) * 16))
    with HostileProxy(("127.0.0.1", instrument.port), [lie]) as proxy:
        s = session_through(proxy, fast=fast)
        # the cap (3 KB) or, on a loaded machine, the deadline (timeout + 3 KB at 1 MB/s) first
        with pytest.raises((ProtocolError, InstrumentTimeout), match=r"above the cap|within"):
            s.query_block_bytes("D?", expected_bytes=RECORD.nbytes)
        honest_after(s, proxy)
        s.close()


@both_paths
def test_a_newline_flood_ends_at_the_expected_size(instrument, fast):
    lie = Lie("D?", endless(b"#0", b"\n" * 256))
    with HostileProxy(("127.0.0.1", instrument.port), [lie]) as proxy:
        s = session_through(proxy, fast=fast)
        # the cap (3 KB) or, on a loaded machine, the deadline (timeout + 3 KB at 1 MB/s) first
        with pytest.raises((ProtocolError, InstrumentTimeout), match=r"above the cap|within"):
            s.query_block_bytes("D?", expected_bytes=RECORD.nbytes)
        honest_after(s, proxy)
        s.close()


def test_an_endless_block_of_unknown_size_ends_at_the_cap_or_the_deadline(instrument):
    # No expected size: the hard cap (1 MiB here), the deadline (timeout + cap / rate floor) or
    # the transport's own 16 MiB bound on a message without its terminator, whichever comes first.
    lie = Lie("D?", endless(b"#0", b"\x55" * 4096))
    with HostileProxy(("127.0.0.1", instrument.port), [lie]) as proxy:
        s = session_through(proxy, max_block_bytes=1 << 20)
        with pytest.raises((ProtocolError, TransportError)):
            s.query_block_bytes("D?")
        honest_after(s, proxy)
        s.close()


def test_a_header_announcing_512_MiB_is_refused_when_the_record_is_known(instrument):
    lie = Lie("D?", header_then_silence(b"#9536870912"))
    with HostileProxy(("127.0.0.1", instrument.port), [lie]) as proxy:
        s = session_through(proxy)
        with pytest.raises(ProtocolError, match="declares 536870912 bytes"):
            s.query_block_bytes("D?", expected_bytes=RECORD.nbytes)
        honest_after(s, proxy)
        s.close()


def test_a_header_announcing_512_MiB_allocates_nothing_before_data_arrives(instrument):
    lie = Lie("D?", header_then_silence(b"#9536870912"))
    with HostileProxy(("127.0.0.1", instrument.port), [lie]) as proxy:
        s = session_through(proxy)
        tracemalloc.start()
        try:
            with pytest.raises(InstrumentTimeout):
                s.query_block_bytes("D?")  # no record size known: only the hard cap applies
            _, peak = tracemalloc.get_traced_memory()
        finally:
            tracemalloc.stop()
        assert peak < 16 * 1024 * 1024, peak  # one chunk, not the 512 MiB announced
        honest_after(s, proxy)
        s.close()


@both_paths
def test_a_stop_request_gives_a_trickling_block_up_between_chunks(instrument, fast):
    # 1 MB announced, 1 KiB every 5 ms: the stop check is asked between 4 KiB chunks.
    lie = Lie("D?", endless(b"#71000000", b"\x01" * 1024, pause_s=0.005))
    asked = []

    def stop() -> bool:
        asked.append(1)
        return len(asked) > 3  # the operator pressed Ctrl-C during the transfer

    with HostileProxy(("127.0.0.1", instrument.port), [lie]) as proxy:
        s = session_through(proxy, fast=fast, block_chunk_bytes=4096)
        s.stop_check = stop
        with pytest.raises(ReadStopped, match="stop request after 12288 of 1000000 bytes"):
            s.query_block_bytes("D?")
        assert proxy.received.count("D?") == 1  # given up, never retried
        s.stop_check = None
        honest_after(s, proxy)
        s.close()


def test_a_stop_request_ends_the_wait_for_a_block_that_went_silent(instrument):
    # The header arrives, then nothing: without looking at the stop flag while it waits, the read
    # would end only at the link timeout (30 s here) with InstrumentTimeout.
    lie = Lie("D?", header_then_silence(b"#41000"))
    pressed = threading.Event()
    with HostileProxy(("127.0.0.1", instrument.port), [lie]) as proxy:
        link = VisaTransport.open(proxy.address, timeout_ms=30_000)
        s = ScpiSession(link)
        s.stop_check = pressed.is_set
        timer = threading.Timer(0.3, pressed.set)  # Ctrl-C while the scope is silent
        timer.start()
        try:
            with pytest.raises(ReadStopped, match="after 0 of 1000 bytes"):
                s.query_block_bytes("D?")
        finally:
            timer.cancel()
        assert proxy.received.count("D?") == 1
        s.stop_check = None
        link.timeout_ms = 300
        honest_after(s, proxy)
        s.close()

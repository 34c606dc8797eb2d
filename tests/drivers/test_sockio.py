"""The socket fast path's waits (drivers/sockio.py) over a real TCP connection on 127.0.0.1.

What is checked is behaviour a caller relies on, with and without the busy poll: a reply is picked up
whether it arrives during the poll or long after it; the poll never stretches a wait past its
timeout; bytes beyond the message stay pending for the next read.  The speed the poll buys is
measured by tests/benchmarks/bench_engine.py (``engine_overhead_no_poll``), not here.
"""

from __future__ import annotations

import socket
import threading
import time
from collections.abc import Iterator

import pytest

from drivers import sockio


@pytest.fixture
def pair() -> Iterator[tuple[socket.socket, socket.socket]]:
    """(ours, peer): two ends of one loopback TCP connection."""
    with socket.create_server(("127.0.0.1", 0)) as server:
        ours = socket.create_connection(server.getsockname())
        peer, _ = server.accept()
    ours.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
    peer.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
    try:
        yield ours, peer
    finally:
        ours.close()
        peer.close()


def send_later(peer: socket.socket, data: bytes, delay_s: float) -> threading.Thread:
    def run() -> None:
        time.sleep(delay_s)
        peer.sendall(data)

    thread = threading.Thread(target=run, daemon=True)
    thread.start()
    return thread


polls = pytest.mark.parametrize("poll_s", [0.0, 200e-6, 0.05], ids=["no-poll", "200us", "50ms"])


@polls
def test_reply_arriving_during_or_after_the_poll_is_received(pair, poll_s):
    ours, peer = pair
    pending = bytearray()
    for delay_s in (0.0, 0.03):  # at once (inside any poll), then well after a 200 us poll
        thread = send_later(peer, b"+1.5E-3\nrest", delay_s)
        message = sockio.receive_message(pending, ours, b"\n", 2.0, 1 << 20, poll_s)
        thread.join()
        assert message == b"+1.5E-3\n"
        assert bytes(pending) == b"rest"  # what follows the terminator waits for the next read
        pending.clear()


@polls
def test_exact_read_spanning_two_late_segments(pair, poll_s):
    ours, peer = pair
    pending = bytearray(b"ab")
    first = send_later(peer, b"cd", 0.01)
    first.join()
    second = send_later(peer, b"efgh", 0.02)
    data = sockio.receive_exactly(pending, ours, 6, 2.0, poll_s)
    second.join()
    assert bytes(data) == b"abcdef"
    assert sockio.receive_exactly(pending, ours, 2, 2.0, poll_s) == bytearray(b"gh")


class SteppingClock:
    """Stands in for the ``time`` module: each reading advances 1 ms, so the length of a busy poll
    becomes a count of clock readings, the same on an idle and on a loaded machine."""

    def __init__(self) -> None:
        self.now = 0.0
        self.readings = 0

    def monotonic(self) -> float:
        self.readings += 1
        self.now += 0.001
        return self.now


def test_poll_longer_than_the_timeout_still_times_out_on_time(pair, monkeypatch):
    ours, _ = pair
    clock = SteppingClock()
    monkeypatch.setattr(sockio, "time", clock)
    with pytest.raises(TimeoutError, match="no reply within 50 ms"):
        sockio.receive_message(bytearray(), ours, b"\n", 0.05, 1 << 20, poll_s=5.0)
    # bounded by the 50 ms deadline (about 50 readings), not by the 5 s poll (about 5,000)
    assert 40 <= clock.readings <= 100, clock.readings


def test_exact_read_timeout_says_how_far_it_got(pair):
    ours, peer = pair
    peer.sendall(b"xyz")
    with pytest.raises(TimeoutError, match="got 3 of 10 bytes within 50 ms"):
        sockio.receive_exactly(bytearray(), ours, 10, 0.05, poll_s=200e-6)


def test_peer_closing_during_the_poll_is_end_of_file(pair):
    ours, peer = pair
    peer.close()
    with pytest.raises(ConnectionResetError, match="closed the link"):
        sockio.receive_message(bytearray(), ours, b"\n", 2.0, 1 << 20, poll_s=0.05)


def _feed(poll: sockio.BusyPoll, on_s: float, off_s: float, waits: int) -> list[bool]:
    """Record ``waits`` waits lasting ``on_s`` when polled, ``off_s`` when not; polled or not, each."""
    seen = []
    for _ in range(waits):
        seen.append(poll.polling)
        poll.record(on_s if poll.polling else off_s)
    return seen


def test_a_busy_poll_that_makes_waits_longer_is_turned_off_until_the_next_trial():
    # the rule is the project's own (sockio.BusyPoll): one window polled, one not, the faster kept
    poll = sockio.BusyPoll(200e-6)
    w, keep = poll.WINDOW, poll.KEEP_WINDOWS * poll.WINDOW
    seen = _feed(poll, on_s=300e-6, off_s=100e-6, waits=2 * w + keep + 1)
    assert seen == [True] * w + [False] * w + [False] * keep + [True]  # kept off, then tried again
    assert poll.budget() == 200e-6


def test_a_busy_poll_that_makes_waits_shorter_stays_on():
    poll = sockio.BusyPoll(200e-6)
    w, keep = poll.WINDOW, poll.KEEP_WINDOWS * poll.WINDOW
    seen = _feed(poll, on_s=50e-6, off_s=400e-6, waits=2 * w + keep)
    assert seen == [True] * w + [False] * w + [True] * keep


def test_no_poll_configured_is_never_tried():
    poll = sockio.BusyPoll(0.0)
    assert _feed(poll, on_s=1e-6, off_s=1.0, waits=3 * poll.WINDOW) == [False] * 3 * poll.WINDOW


def test_waits_through_a_busy_poll_are_timed_for_its_trial(pair):
    ours, theirs = pair
    poll = sockio.BusyPoll(0.05)
    pending = bytearray()
    for _ in range(3):
        theirs.sendall(b"1\n")
        assert sockio.receive_message(pending, ours, b"\n", 2.0, 1 << 20, poll) == b"1\n"
    assert len(poll._waits[True]) == 3 and all(w >= 0 for w in poll._waits[True])


def test_a_block_arriving_in_one_segment_is_read_with_one_receive(pair):
    # IEEE 488.2 definite block: '#', the digit count, the length digits, the data, the terminator
    ours, peer = pair
    payload = bytes(range(256)) * 4
    peer.sendall(b"#41024" + payload + b"\n")
    time.sleep(0.05)  # the whole reply is in our socket's buffer
    pending = bytearray()
    assert sockio.receive_exactly(pending, ours, 2, 2.0) == bytearray(b"#4")
    # what came with the header waits in the pending buffer: the rest needs no further receive
    assert bytes(pending) == b"1024" + payload + b"\n"
    assert sockio.receive_exactly(pending, ours, 4, 2.0) == bytearray(b"1024")
    assert bytes(sockio.receive_exactly(pending, ours, 1024, 2.0)) == payload
    assert sockio.receive_message(pending, ours, b"\n", 2.0, 1 << 20) == b"\n"
    assert not pending


def test_a_read_longer_than_one_receive_goes_straight_into_its_buffer(pair):
    ours, peer = pair
    big = bytes(range(256)) * ((sockio.RECV_SIZE * 3) // 256)
    thread = send_later(peer, big + b"tail", 0.0)
    pending = bytearray()
    data = sockio.receive_exactly(pending, ours, len(big), 5.0)
    thread.join()
    assert bytes(data) == big
    assert sockio.receive_exactly(pending, ours, 4, 2.0) == bytearray(b"tail")


@polls
def test_waiting_for_input_receives_it_for_the_read_that_follows(pair, poll_s):
    ours, peer = pair
    pending = bytearray()
    assert sockio.wait_for_bytes(pending, ours, 0.02, poll_s) is False  # nothing sent: a slice ends
    thread = send_later(peer, b"#15hello\n", 0.01)
    assert sockio.wait_for_bytes(pending, ours, 2.0, poll_s) is True
    thread.join()
    assert pending.startswith(b"#1")  # already received: the header read needs no system call
    time.sleep(0.02)
    assert sockio.receive_exactly(pending, ours, 3, 2.0) == bytearray(b"#15")
    assert sockio.receive_message(pending, ours, b"\n", 2.0, 1 << 20) == b"hello\n"


def test_waiting_for_input_sees_the_peer_close(pair):
    ours, peer = pair
    peer.close()
    pending = bytearray()
    assert sockio.wait_for_bytes(pending, ours, 2.0, 200e-6) is True  # the read reports it
    with pytest.raises(ConnectionResetError, match="closed the link"):
        sockio.receive_message(pending, ours, b"\n", 2.0, 1 << 20)

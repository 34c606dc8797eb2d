"""Message and byte reads on a TCP socket that a pyvisa-py SOCKET session owns.

Used by :mod:`drivers.transport` for the fast path: the bytes pyvisa-py has already received (its
pending buffer, a ``bytearray``) are consumed first and kept consistent, so pyvisa's own reads and these
can follow each other.  Errors are the built-in ``TimeoutError`` and ``ConnectionResetError``; the
transport maps them to ours with the address attached.  Every wait is bounded by a deadline.

Busy poll: a wait for a reply first polls the socket without blocking for up to ``poll_s`` (the
transport's ``busy_poll_us``) and only then sleeps in ``select``.  A reply that comes back within tens
of microseconds (a simulator, an instrument on a quiet LAN) is then picked up without the thread going
to sleep: waking a sleeping thread costs more than the reply itself on a virtual machine (measured
with tests/benchmarks/bench_engine.py, see the README).  The poll releases the interpreter lock at
every system call, so an instrument simulated in the same process still gets to answer.

On a loaded machine the poll takes the CPU the instrument's own process needs (measured:
``engine_overhead`` 1.33 with the poll against 0.85 without it at a load average of 14-20 on 2 CPUs;
on a quiet machine the poll wins, 1.19-1.21 without it).  :class:`BusyPoll` therefore decides per
link, by trial, whether waits poll.
"""

from __future__ import annotations

import contextlib
import select
import socket
import statistics
import threading
import time
from typing import Any

RECV_SIZE = 65536
_DONTWAIT = getattr(socket, "MSG_DONTWAIT", 0)


class BusyPoll:
    """How long a wait polls before it sleeps: ``poll_s`` while polling pays, 0 while it does not.

    Decided by trial, per link: a window of waits with the poll and a window without it, the
    median wait of each compared (the whole wait, poll and sleep); the faster way is kept for
    ``KEEP_WINDOWS`` windows, then tried again (a machine's load changes).  Not thread-safe by
    design: one per link, used under the session's lock."""

    #: waits per trial window
    WINDOW = 16
    #: windows the decision holds before the next trial
    KEEP_WINDOWS = 16

    __slots__ = ("_left", "_on", "_phase", "_waits", "poll_s")

    def __init__(self, poll_s: float) -> None:
        self.poll_s = max(0.0, poll_s)
        self._phase = "trial-on"  # then "trial-off", then "keep"
        self._on = True  # the poll as used now
        self._waits: dict[bool, list[float]] = {True: [], False: []}
        self._left = 0  # waits left in "keep"

    @property
    def polling(self) -> bool:
        """Whether waits poll now."""
        return self._on and self.poll_s > 0.0

    def budget(self) -> float:
        """Seconds the next wait may poll."""
        return self.poll_s if self.polling else 0.0

    def record(self, waited_s: float) -> None:
        """One wait's length (seconds, poll and sleep together)."""
        if self.poll_s <= 0.0:
            return
        if self._phase == "keep":
            self._left -= 1
            if self._left <= 0:
                self._phase, self._on = "trial-on", True
                self._waits = {True: [], False: []}
            return
        window = self._waits[self._on]
        window.append(waited_s)
        if len(window) < self.WINDOW:
            return
        if self._phase == "trial-on":
            self._phase, self._on = "trial-off", False
            return
        on, off = (statistics.median(self._waits[k]) for k in (True, False))
        self._phase, self._on = "keep", on <= off
        self._left = self.KEEP_WINDOWS * self.WINDOW


#: Busy-poll decisions of closed links, by (address, poll seconds): see :func:`busy_poll_for`.
_KEPT_POLLS: dict[tuple[str, float], BusyPoll] = {}
_KEPT_LOCK = threading.Lock()


def busy_poll_for(address: str, poll_s: float) -> BusyPoll:
    """The :class:`BusyPoll` the last closed link to ``address`` left (:func:`keep_busy_poll`), or
    a new one.  Whether polling pays is a property of the machine and the instrument, not of one
    opening: a batch opens the same instruments board after board, and a new trial per opening
    spent half of every run's first 32 waits on the losing side (sleeping on a quiet machine,
    polling on a loaded one).  Each kept decision goes to one link at a time."""
    with _KEPT_LOCK:
        return _KEPT_POLLS.pop((address, max(0.0, poll_s)), None) or BusyPoll(poll_s)


def keep_busy_poll(address: str, poll: BusyPoll) -> None:
    """Keep a closing link's decision for the next opening of ``address`` in this process."""
    with _KEPT_LOCK:
        _KEPT_POLLS[(address, poll.poll_s)] = poll


class SessionLink:
    """The pending buffer and socket of the pyvisa-py SOCKET session a transport reads on.

    Found with ``getattr`` once per session (any object: one without them has no fast link); then
    each use checks with two identity tests that the session still holds the same buffer and
    socket -- pyvisa-py's own reads replace its buffer, its close drops the socket -- and looks
    again when it does not.  Four ``getattr`` and type tests per exchange cost more than the
    reply's own parsing did."""

    __slots__ = ("_link", "_session")

    def __init__(self) -> None:
        self._session: Any = None
        self._link: tuple[bytearray, socket.socket] | None = None

    def of(self, session: Any) -> tuple[bytearray, socket.socket] | None:
        """``(pending, sock)`` of ``session``, or None when it has no such pair."""
        link = self._link
        if (session is self._session and link is not None
                and session._pending_buffer is link[0] and session.interface is link[1]):  # fmt: skip
            return link
        pending = getattr(session, "_pending_buffer", None)
        sock = getattr(session, "interface", None)
        self._session = session
        self._link = (pending, sock) if type(pending) is bytearray and isinstance(
            sock, socket.socket) else None  # fmt: skip
        return self._link


def peer_closed(sock: socket.socket | None) -> bool:
    """True when the peer has closed: the socket is readable and a peek returns end-of-file."""
    if sock is None:
        return False
    try:
        ready, _, _ = select.select([sock], [], [], 0)
        return bool(ready) and sock.recv(1, socket.MSG_PEEK) == b""
    except (OSError, ValueError):
        return True


def send_all(sock: socket.socket, data: bytes, timeout_s: float) -> None:
    """Send every byte of ``data`` or raise ``TimeoutError``."""
    if _DONTWAIT:  # one system call when the send buffer has room (the usual case)
        try:
            sent = sock.send(data, _DONTWAIT)
        except BlockingIOError:
            sent = 0
        if sent == len(data):
            return
        view = memoryview(data)[sent:]
    else:
        view = memoryview(data)
    deadline = time.monotonic() + timeout_s
    while view:
        _, ready, _ = select.select([], [sock], [], _remaining(deadline))
        if not ready:
            raise TimeoutError(f"could not send within {timeout_s * 1000:.0f} ms")
        view = view[sock.send(view) :]


def receive_message(
    pending: bytearray,
    sock: socket.socket,
    term: bytes,
    timeout_s: float,
    max_bytes: int,
    poll_s: float | BusyPoll = 0.0,
) -> bytes:
    """Bytes up to and including the terminator byte ``term``; the rest stays in ``pending``."""
    deadline = time.monotonic() + timeout_s
    searched = 0
    while True:
        at = pending.find(term, searched)
        if at >= 0:
            message = bytes(pending[: at + 1])
            del pending[: at + 1]
            return message
        searched = len(pending)
        if searched > max_bytes:
            raise ConnectionResetError(f"reply longer than {max_bytes} bytes without a terminator")
        _wait_readable(sock, deadline, timeout_s, "no reply", poll_s)
        chunk = sock.recv(RECV_SIZE)
        if not chunk:
            raise ConnectionResetError("the instrument closed the link")
        pending += chunk


def receive_exactly(
    pending: bytearray,
    sock: socket.socket,
    n: int,
    timeout_s: float,
    poll_s: float | BusyPoll = 0.0,
) -> bytearray:
    """Exactly ``n`` bytes (no termination character); what came with them stays in ``pending``.

    Up to ``RECV_SIZE`` bytes are taken from ``pending``, filled a whole ``recv`` at a time: a
    block's ``#<n>`` header, its length digits, a short record and its terminator usually arrive
    in one segment, so they cost one wait and one system call instead of one per piece.  Longer
    reads are received straight into one buffer of their own (no copy per layer)."""
    if n <= RECV_SIZE:
        return _take_exactly(pending, sock, n, timeout_s, poll_s)
    buffer = bytearray(n)
    view = memoryview(buffer)
    got = min(len(pending), n)
    view[:got] = pending[:got]
    del pending[:got]
    deadline = time.monotonic() + timeout_s
    while got < n:
        _wait_readable(sock, deadline, timeout_s, f"got {got} of {n} bytes", poll_s)
        count = sock.recv_into(view[got:], n - got)
        if count == 0:
            raise ConnectionResetError(f"the instrument closed the link after {got} of {n} bytes")
        got += count
    return buffer


def _take_exactly(
    pending: bytearray, sock: socket.socket, n: int, timeout_s: float, poll_s: float | BusyPoll
) -> bytearray:
    if len(pending) < n:
        deadline = time.monotonic() + timeout_s
        while len(pending) < n:
            _wait_readable(sock, deadline, timeout_s, f"got {len(pending)} of {n} bytes", poll_s)
            chunk = sock.recv(RECV_SIZE)
            if not chunk:
                raise ConnectionResetError(
                    f"the instrument closed the link after {len(pending)} of {n} bytes"
                )
            pending += chunk
    data = pending[:n]
    del pending[:n]
    return data


def wait_for_bytes(
    pending: bytearray, sock: socket.socket, timeout_s: float, poll_s: float | BusyPoll = 0.0
) -> bool:
    """True once input waits in ``pending`` (received here, so the read that follows needs no
    system call) or the peer closed; False when nothing came within ``timeout_s``.  Polls first
    like the reads do (``poll_s``, or what a :class:`BusyPoll` allows now), then sleeps: a stop
    flag's wait for a reply would otherwise always go to sleep and pay the wake-up."""
    if pending:
        return True
    budget = poll_s.budget() if isinstance(poll_s, BusyPoll) else poll_s
    try:
        _wait_readable(sock, time.monotonic() + timeout_s, timeout_s, "no input", budget)
    except TimeoutError:
        return False
    with contextlib.suppress(BlockingIOError, InterruptedError):  # readable: recv does not block
        pending += sock.recv(RECV_SIZE, _DONTWAIT)  # b"" at end-of-file: the read reports it
    return True


def discard_input(sock: socket.socket, timeout_s: float, quiet_s: float = 0.1) -> None:
    """Read and drop whatever arrives until the link has been quiet for ``quiet_s`` (the rule
    pyvisa-py's ``clear`` uses), giving up with ``ConnectionResetError`` after ``timeout_s`` of
    input that never stops, or at end-of-file."""
    deadline = time.monotonic() + timeout_s
    while select.select([sock], [], [], quiet_s)[0]:
        if not sock.recv(RECV_SIZE):
            raise ConnectionResetError("the instrument closed the link")
        if time.monotonic() > deadline:
            raise ConnectionResetError(
                f"the instrument kept sending for {timeout_s * 1000:.0f} ms (a flood); "
                "the link is reopened"
            )


def _wait_readable(
    sock: socket.socket, deadline: float, timeout_s: float, what: str, poll: float | BusyPoll
) -> None:
    """Return once ``sock`` is readable: busy-poll (``poll`` seconds, or what a :class:`BusyPoll`
    allows now), then sleep until ``deadline``."""
    if isinstance(poll, BusyPoll):
        start = time.monotonic()
        _wait_readable(sock, deadline, timeout_s, what, poll.budget())
        poll.record(time.monotonic() - start)
        return
    if poll > 0.0:
        poll_until = min(deadline, time.monotonic() + poll)
        while True:
            if select.select([sock], [], [], 0)[0]:
                return
            if time.monotonic() >= poll_until:
                break
    ready, _, _ = select.select([sock], [], [], _remaining(deadline))
    if not ready:
        raise TimeoutError(f"{what} within {timeout_s * 1000:.0f} ms")


def _remaining(deadline: float) -> float:
    return max(0.0, deadline - time.monotonic())

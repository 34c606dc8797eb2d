"""Every exception from pyvisa or its backend leaves the transport as our TransportError family.

pyvisa-py's HiSLIP session raises a plain ``RuntimeError`` when the peer drops (issue 14): it must
become ``ConnectionClosed`` (the session reconnects, the safe state runs), never an internal error.
The pyvisa resource is the edge here: a stand-in that raises what a backend raises.
"""

import pytest

from drivers.errors import ConnectionClosed, InstrumentTimeout, TransportError
from drivers.transport import TransportSettings, VisaTransport


class FailingResource:
    """A resource whose I/O raises ``error`` (as a backend would)."""

    def __init__(self, error: BaseException) -> None:
        self.error = error
        self.timeout = 5000

    def write(self, text: str) -> None:
        raise self.error

    def read_raw(self) -> bytes:
        raise self.error

    def clear(self) -> None:
        raise self.error

    def close(self) -> None:
        raise self.error


def transport(error: BaseException) -> VisaTransport:
    settings = TransportSettings(socket_fast_path=False)
    return VisaTransport("TCPIP0::127.0.0.1::hislip0::INSTR", settings, FailingResource(error))


@pytest.mark.parametrize(
    ("error", "kind"),
    [
        (RuntimeError("connection lost"), ConnectionClosed),  # pyvisa-py HiSLIP, peer dropped
        (EOFError(), ConnectionClosed),  # the RPC layer under VXI-11
        (ConnectionResetError("reset by peer"), ConnectionClosed),
        (TimeoutError("timed out"), InstrumentTimeout),
        (KeyError("session"), TransportError),  # anything else a backend may raise
        (ValueError("bad state"), TransportError),
    ],
)
def test_backend_errors_map_to_the_transport_family(error, kind):
    link = transport(error)
    with pytest.raises(kind) as exc:
        link.write("MEASure:VOLTage:DC?")
    assert exc.value.address == "TCPIP0::127.0.0.1::hislip0::INSTR"
    assert exc.value.command == "MEASure:VOLTage:DC?"
    assert exc.value.__cause__ is error
    with pytest.raises(kind):
        link.read()
    with pytest.raises(kind):
        link.drain()
    link.close()  # closing a dead link never raises; why it failed is kept
    assert type(error).__name__ in link.close_error


def test_keyboard_interrupt_is_not_swallowed():
    with pytest.raises(KeyboardInterrupt):
        transport(KeyboardInterrupt()).write("*IDN?")

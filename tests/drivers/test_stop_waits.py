"""Dialect waits and polls look at the run's stop flag (issue 19 item 1: every loop that waits
checks it), over the scripted link: a stop request ends them with ReadStopped, never retried."""

import textwrap

import pytest

from drivers.dialect import parse_dialect
from drivers.errors import ReadStopped
from drivers.roles.scope import Scope
from drivers.scpi.session import ScpiSession
from tests.drivers.scripted import ScriptedTransport, configured


def dialect(body: str):
    return parse_dialect("dialect: lab\nformat: 2\n" + textwrap.dedent(body), "lab.yaml")


def test_a_poll_that_would_wait_an_hour_ends_at_a_stop_request():
    d = dialect(
        """\
        roles:
          scope:
            acquire:
              sequence:
                - {poll: "ACQuire:STATe?", until: "value == 0", every_ms: 1, timeout_ms: 600000}
        """
    )
    t = ScriptedTransport().expect(*[("ACQuire:STATe?", b"1\n")] * 3)
    session = ScpiSession(t)
    polls = []
    session.stop_check = lambda: len(t.writes) >= 3 and not polls.append(1)
    with pytest.raises(ReadStopped, match="stop request"):
        Scope(session, d)._write("acquire", reapply=False)
    assert t.writes == ["ACQuire:STATe?"] * 3  # polled until the stop, then no more
    t.assert_done()


def test_a_declared_wait_ends_at_a_stop_request():
    d = dialect(
        """\
        roles:
          scope:
            acquire:
              sequence:
                - {write: "SINGle"}
                - {wait: 60}
        """
    )
    t = ScriptedTransport().expect(configured("SINGle"))
    session = ScpiSession(t)
    session.stop_check = lambda: True
    with pytest.raises(ReadStopped):
        Scope(session, d)._write("acquire", reapply=False)
    t.assert_done()


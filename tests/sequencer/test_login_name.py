"""The operator defaults to the login name (issue 22).  getpass.getuser reads LOGNAME, USER, LNAME,
USERNAME in that order, then the password database (Python documentation, getpass.getuser)."""

from __future__ import annotations

import getpass

import pytest

from sequencer.cli_common import UNKNOWN_OPERATOR, login_name


def test_the_login_name_comes_from_the_environment_first(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("LOGNAME", "t.newcomer")
    assert login_name() == "t.newcomer" == getpass.getuser()


def test_no_login_name_is_said_not_left_blank(monkeypatch: pytest.MonkeyPatch) -> None:
    def nobody() -> str:
        raise OSError("no login name")

    monkeypatch.setattr(getpass, "getuser", nobody)
    assert login_name() == UNKNOWN_OPERATOR

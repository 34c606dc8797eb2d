"""Every shipped example passes on a healthy simulated board (issue 22: the README's own example
must not fail a healthy board).  Exit codes per DESIGN.md: 0 = every value within its limits."""

from __future__ import annotations

from pathlib import Path

import pytest
from click.testing import CliRunner

from sequencer.cli import attach_commands, cli

ROOT = Path(__file__).resolve().parents[2]
EXAMPLES = sorted((ROOT / "procedures" / "examples").glob("*.yaml"))
BOARD = ROOT / "drivers" / "sim" / "boards" / "example-pa8.yaml"

attach_commands()


def test_there_are_examples() -> None:
    assert EXAMPLES, "procedures/examples/ ships no YAML file"


@pytest.mark.parametrize("path", EXAMPLES, ids=lambda p: p.name)
def test_example_passes_on_the_healthy_board(path: Path, tmp_path: Path) -> None:
    url = f"sqlite:///{tmp_path / 'results.db'}"
    result = CliRunner().invoke(
        cli, ["run", str(path), "--sim", str(BOARD), "--db", url, "--yes", "--operator", "T. Tester"],
        catch_exceptions=False,
    )
    assert result.exit_code == 0, result.stdout + result.stderr
    assert "PASS" in result.stdout

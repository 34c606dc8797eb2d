"""Issue 22's "done when": from the guide alone to a passing run.  The first procedure of
docs/procedures.md, taken from the page as a reader copies it, runs on the simulated healthy board
the guide names with the command the guide gives, and passes (exit 0, every value judged)."""

from __future__ import annotations

import re
from pathlib import Path

from click.testing import CliRunner

from sequencer.cli import attach_commands, cli
from sequencer.store import Store

ROOT = Path(__file__).resolve().parents[2]
GUIDE = ROOT / "docs" / "procedures.md"

attach_commands()


def test_the_guides_first_procedure_passes_on_the_healthy_simulated_board(tmp_path: Path) -> None:
    text = GUIDE.read_text(encoding="utf-8")
    block = re.search(r"```yaml\n# file: my-gain.yaml\n(.*?)```", text, re.DOTALL)
    assert block is not None
    proc = tmp_path / "my-gain.yaml"
    proc.write_text(block[1], encoding="utf-8")
    # the command the guide prints, with the board file it names (paths from the repository root)
    command = re.search(r"^benchwright run my-gain.yaml --sim (\S+) --yes$", text, re.MULTILINE)
    assert command is not None
    board = ROOT / command[1]
    url = f"sqlite:///{tmp_path / 'r.db'}"
    result = CliRunner().invoke(
        cli, ["run", str(proc), "--sim", str(board), "--yes", "--db", url], catch_exceptions=False
    )
    assert result.exit_code == 0, result.stdout + result.stderr
    assert "warning" not in result.stderr  # nothing measured that its limits cannot judge
    with Store.open(url) as store:
        measured = store.measurements()
        # 2 channels x gain, offset_mV, inl_pct on x1, each judged pass
        assert len(measured) == 6
        assert {m.verdict for m in measured} == {"pass"}

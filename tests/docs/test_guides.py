"""The guides check out: every YAML example in docs/procedures.md and docs/batch.md is read the way
`benchwright validate` and `benchwright batch` read it, and the guide's table of step kinds names
every kind with every argument (the kinds table in sequencer/procedure/kinds.py is the outside
contract the guide describes).

Each ```yaml block starts with a comment saying what it is:

* ``# file: NAME`` - a whole file, written under that name beside the others of its guide (so
  includes and limits resolve as they would for the reader) and validated: no problem allowed;
* ``# steps`` - a piece of a ``steps:`` list, validated inside a minimal PA8 procedure;
* ``# wrong: MESSAGE`` - a mistake the guide shows: validating it must give MESSAGE.
"""

from __future__ import annotations

import re
import shutil
from pathlib import Path

import pytest

from sequencer.errors import ProcedureError
from sequencer.procedure import (
    board_info,
    build_plan,
    check_fragment,
    is_fragment_text,
    load_batch,
    load_procedure,
    validate_paths,
)
from sequencer.procedure.batch import parse_batch_text
from sequencer.procedure.board_choice import choose_board
from sequencer.procedure.kinds import KINDS
from sequencer.procedure.kinds_doc import kinds_table

ROOT = Path(__file__).resolve().parents[2]
DOCS = ROOT / "docs"
QUICK = ROOT / "procedures" / "examples" / "quick-gain.yaml"
BLOCK = re.compile(r"^```yaml\n(.*?)^```", re.MULTILINE | re.DOTALL)
# the guide's snippets use its example parameter `top` (docs/procedures.md, "Parameters")
HEAD = "name: snippet\nversion: '0.1-draft'\nboard_type: PA8\nparameters: {top: 160 mV}\nsteps:\n"


def blocks(guide: str) -> list[tuple[str, str]]:
    """(first line, the rest) of every ```yaml block of ``guide``."""
    text = (DOCS / guide).read_text(encoding="utf-8")
    found = [b.split("\n", 1) for b in BLOCK.findall(text)]
    return [(first.strip(), rest) for first, rest in found]


def test_every_block_says_what_it_is():
    for guide in ("procedures.md", "batch.md"):
        found = blocks(guide)
        assert len(found) >= 3, guide
        for first, _ in found:
            assert re.match(r"^# (file: \S+|steps|wrong: .+)$", first), (guide, first)


def _write_files(guide: str, folder: Path) -> list[Path]:
    paths = []
    for first, rest in blocks(guide):
        if first.startswith("# file: "):
            path = folder / first.removeprefix("# file: ")
            path.parent.mkdir(parents=True, exist_ok=True)
            path.write_text(rest, encoding="utf-8")
            paths.append(path)
    return paths


def _snippet(rest: str) -> str:
    return HEAD + "".join(f"  {line}\n" for line in rest.splitlines())


def _problems(path: Path) -> list[str]:
    return [p.message for p in validate_paths([path])]


def test_procedure_guide_files_validate(tmp_path: Path):
    paths = _write_files("procedures.md", tmp_path)
    assert {p.name for p in paths} >= {"my-gain.yaml", "scan.yaml", "uses-scan.yaml"}
    for path in paths:
        if is_fragment_text(path.read_text(encoding="utf-8")):
            assert check_fragment(path, "PA8") == [], path.name
        else:
            assert validate_paths([path]) == [], path.name


def test_procedure_guide_snippets_validate_and_mistakes_give_their_message(tmp_path: Path):
    seen = {"steps": 0, "wrong": 0}
    for index, (first, rest) in enumerate(blocks("procedures.md")):
        if first.startswith("# file: "):
            continue
        path = tmp_path / f"snippet-{index}.yaml"
        path.write_text(_snippet(rest), encoding="utf-8")
        problems = _problems(path)
        if first == "# steps":
            seen["steps"] += 1
            assert problems == [], (rest, problems)
        else:
            seen["wrong"] += 1
            message = first.removeprefix("# wrong: ")
            assert any(message in p for p in problems), (message, problems)
    assert seen["steps"] >= 3 and seen["wrong"] >= 2


def test_the_first_procedure_plans_on_the_board_it_names(tmp_path: Path):
    # the reader's first file: a real plan with the loops, the sweep and the analysis it describes
    (path,) = [p for p in _write_files("procedures.md", tmp_path) if p.name == "my-gain.yaml"]
    plan = build_plan(load_procedure(path), board_info("PA8", "NR-PA8-0001"))
    transfers = [s.path for s in plan.steps if s.kind == "analyse.transfer"]
    assert transfers == ["ch1/x1/transfer", "ch2/x1/transfer"]
    assert sum(s.kind == "pulser.amplitude" for s in plan.steps) == 2 * 5


def test_mistake_table_lines_are_what_validate_says(tmp_path: Path):
    # the table "you wrote / you are told": each row written as a one-step procedure
    text = (DOCS / "procedures.md").read_text(encoding="utf-8")
    section = text.split("## Mistakes and what `validate` says", 1)[1].split("\n\n", 2)[1]
    rows = [r for r in section.splitlines() if r.startswith("| `")]
    assert len(rows) >= 4
    checked = 0
    for row in rows:
        wrote, told = (cell.strip().strip("`") for cell in row.strip("|").split("|")[:2])
        if "outside" in wrote or "without" in wrote or wrote.startswith("for_"):
            continue  # rows that describe a situation, or a loop that needs its do: block
        path = tmp_path / f"row-{checked}.yaml"
        path.write_text(_snippet(f"- {wrote}"), encoding="utf-8")
        assert any(told.split(" (did")[0] in p for p in _problems(path)), (wrote, told)
        checked += 1
    assert checked >= 3


def test_the_guide_names_every_step_kind_with_its_arguments():
    # after adding a kind: python -m sequencer.procedure.kinds_doc docs/procedures.md
    text = (DOCS / "procedures.md").read_text(encoding="utf-8")
    table = text.split("## Step kinds", 1)[1]
    assert text.endswith(kinds_table()), "run: python -m sequencer.procedure.kinds_doc docs/procedures.md"
    rows = {m[1]: m[0] for m in re.finditer(r"^\| `([a-z_.]+)` \|.*$", table, re.MULTILINE)}
    assert set(rows) == set(KINDS), set(KINDS) ^ set(rows)
    for name, kind in KINDS.items():
        for arg in kind.args:
            assert f"`{arg.name}`" in rows[name], (name, arg.name)
        if kind.hazard:
            assert "hazard" in rows[name], name


def test_batch_guide_files_load_and_every_board_plans(tmp_path: Path):
    shutil.copy(QUICK, tmp_path / "quick-gain.yaml")  # the procedure the examples name
    paths = _write_files("batch.md", tmp_path)
    assert paths
    for path in paths:
        batch = load_batch(path)
        for board in batch.boards:  # a board may name its own procedure and parameters
            procedure = load_procedure(batch.procedure_of(board))
            chosen, info, _ = choose_board(procedure, board.serial, board.board_type)
            build_plan(chosen, info, overrides=batch.parameters_of(board))
        assert {b.board_type for b in batch.boards} == {"PA8", "PA8N"}


def test_batch_guide_mistakes_give_their_message(tmp_path: Path):
    wrong = [(first, rest) for first, rest in blocks("batch.md") if first.startswith("# wrong: ")]
    assert len(wrong) >= 3
    for first, rest in wrong:
        with pytest.raises(ProcedureError) as exc:
            parse_batch_text(rest, str(tmp_path / "batch.yaml"))
        messages = [p.message for p in exc.value.problems]
        assert any(first.removeprefix("# wrong: ") in m for m in messages), (first, messages)


def test_readme_links_both_guides():
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    assert "docs/procedures.md" in readme and "docs/batch.md" in readme

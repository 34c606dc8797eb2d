"""Fragments (files for include:) checked on their own: by function and by `benchwright validate`."""

from __future__ import annotations

from pathlib import Path

import pytest
from click.testing import CliRunner

from sequencer.cli import cli
from sequencer.procedure import check_fragment, validate_paths

PARTS = Path(__file__).resolve().parents[3] / "procedures" / "parts"
FRAGMENT_MODELINE = "# yaml-language-server: $schema=../fragment.schema.json\n"


@pytest.mark.parametrize("path", sorted(PARTS.glob("*.yaml")), ids=lambda p: p.name)
def test_every_shipped_fragment_checks_alone_and_plans_for_pa8(path: Path):
    assert check_fragment(path) == []
    assert check_fragment(path, "PA8") == []
    # the modeline alone makes validate take it as a fragment
    assert validate_paths([path]) == []


def _write(tmp_path: Path, text: str, name: str = "part.yaml") -> Path:
    sub = tmp_path / "parts"
    sub.mkdir(exist_ok=True)
    path = sub / name
    path.write_text(text)
    return path


def test_a_fragment_problem_is_located_in_the_fragment(tmp_path: Path):
    path = _write(
        tmp_path,
        FRAGMENT_MODELINE + "name: part\nsteps:\n  - wait: 1 s\n  - pulser.amplitud: 20 mV\n",
    )
    problems = check_fragment(path)
    assert len(problems) == 1
    where = problems[0].location
    assert (where.file, where.line, where.column) == (str(path), 5, 5)
    assert "pulser.amplitude" in problems[0].message  # the suggestion


def test_a_fragment_with_procedure_keys_is_refused_at_the_key(tmp_path: Path):
    path = _write(tmp_path, FRAGMENT_MODELINE + "name: part\nboard_type: PA8\nsteps:\n  - wait: 1 s\n")
    problems = check_fragment(path)
    assert [(p.location.line, p.location.column) for p in problems] == [(3, 1)]
    assert "board_type" in problems[0].message


def test_planning_needs_the_board_type_and_finds_what_only_a_board_shows(tmp_path: Path):
    # output x9 does not exist on a PA8 (outputs x1, x5, shaped): only a plan for that type can tell
    path = _write(
        tmp_path,
        FRAGMENT_MODELINE + "name: part\nsteps:\n  - switch.route: {channel: 1, output: x9, input: 1}\n",
    )
    assert check_fragment(path) == []
    problems = check_fragment(path, "PA8")
    assert problems and all(p.location.file == str(path) for p in problems)


def test_validate_command_on_a_fragment(tmp_path: Path):
    good = _write(tmp_path, FRAGMENT_MODELINE + "name: part\nsteps:\n  - wait: 1 s\n")
    runner = CliRunner()
    result = runner.invoke(cli, ["validate", str(good)])
    assert result.exit_code == 0, result.output
    assert "ok (fragment" in result.output
    # without the modeline, --fragment says what it is; without either it is a procedure missing keys
    bare = _write(tmp_path, "name: part\nsteps:\n  - wait: 1 s\n", "bare.yaml")
    assert runner.invoke(cli, ["validate", "--fragment", str(bare)]).exit_code == 0
    refused = runner.invoke(cli, ["validate", str(bare)])
    assert refused.exit_code == 2
    assert "board_type" in refused.output


def test_schema_command_prints_the_fragment_schema():
    import json

    result = CliRunner().invoke(cli, ["schema", "--fragment"])
    assert result.exit_code == 0
    assert json.loads(result.output)["required"] == ["name", "steps"]


def test_a_fragment_checked_as_a_procedure_says_how_to_check_it(tmp_path: Path):
    bare = tmp_path / "bare.yaml"
    bare.write_text("name: part\nsteps:\n  - wait: 1 s\n")
    messages = [p.message for p in validate_paths([bare])]
    assert any(m.startswith("a procedure needs 'board_type', e.g. 'board_type: PA8'; if this is a "
                            "file of steps for include:") and "--fragment" in m for m in messages)
    # a file with a procedure's own keys is not taken for a fragment: no hint
    procedure = tmp_path / "proc.yaml"
    procedure.write_text("name: p\nversion: '1'\nhazards: [bias]\nsteps:\n  - wait: 1 s\n")
    assert [p.message for p in validate_paths([procedure])] == ["a procedure needs 'board_type'"]

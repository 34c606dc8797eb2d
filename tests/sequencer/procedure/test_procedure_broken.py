"""A corpus of broken procedures: every problem is reported, each at its exact file:line:column.

Each file under ``broken/`` states what it expects in ``# expect: LINE:COLUMN: message`` comments (the
message is matched as a substring); lines and columns are 1-based, counted as an editor counts them.
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from sequencer.errors import ProcedureError
from sequencer.procedure import validate_paths

BROKEN = sorted((Path(__file__).parent / "broken").glob("*.yaml"))
EXPECT = re.compile(r"^# expect: (\d+):(\d+): (.+)$", re.MULTILINE)


def _expectations(path: Path) -> list[tuple[int, int, str]]:
    return [(int(a), int(b), msg) for a, b, msg in EXPECT.findall(path.read_text())]


def test_corpus_is_not_empty():
    assert len(BROKEN) >= 20
    assert all(_expectations(p) for p in BROKEN), "every broken file states what it expects"


@pytest.mark.parametrize("path", BROKEN, ids=lambda p: p.stem)
def test_each_problem_located(path: Path):
    problems = validate_paths([path])
    got = [(p.location.line, p.location.column, p.message) for p in problems]
    expected = _expectations(path)
    assert len(got) == len(expected), "\n".join(map(str, problems))
    for (line, column, message), problem in zip(expected, problems, strict=True):
        assert problem.location.file == str(path)
        assert (problem.location.line, problem.location.column) == (line, column), str(problem)
        assert message in problem.message, str(problem)
        assert str(problem).startswith(f"{path}:{line}:{column}: ")


def test_error_lists_every_problem_at_once(tmp_path: Path):
    path = tmp_path / "many.yaml"
    path.write_text(
        "name: many\nversion: 1\nboard_type: PA8\nsteps:\n  - wiat: 1 s\n  - wait: 1 parsec\n"
        "  - scope.average: {cuont: 3}\n"
    )
    from sequencer.procedure import load_procedure

    with pytest.raises(ProcedureError) as exc:
        load_procedure(path)
    lines = str(exc.value).splitlines()
    assert [line.split(": ")[0] for line in lines] == [
        f"{path}:5:5",
        f"{path}:6:11",
        f"{path}:7:20",
        f"{path}:7:21",
    ]

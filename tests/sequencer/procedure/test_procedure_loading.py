"""Loading: every shipped procedure validates, schema, stored-text reruns, includes, limits by reference."""

from __future__ import annotations

import json
from pathlib import Path

import jsonschema
import pytest
import yaml

from sequencer.errors import ProcedureError
from sequencer.procedure import (
    board_info,
    build_plan,
    fragment_schema,
    load_procedure,
    load_procedure_text,
    procedure_schema,
    schema_text,
    validate_paths,
)
from sequencer.procedure.kinds import KINDS

ROOT = Path(__file__).resolve().parents[3]
PROCEDURES = ROOT / "procedures"
DATA = Path(__file__).parent / "data"
NON_PROCEDURES = {"boards", "limits", "parts"}


def shipped_procedures() -> list[Path]:
    """Every YAML under procedures/ except board-type and limits files (glob: later files count too)."""
    return sorted(
        p
        for p in PROCEDURES.rglob("*.yaml")
        if not NON_PROCEDURES.intersection(p.relative_to(PROCEDURES).parts)
    )


def test_there_are_shipped_procedures():
    assert PROCEDURES / "examples" / "quick-gain.yaml" in shipped_procedures()


@pytest.mark.parametrize("path", shipped_procedures(), ids=lambda p: str(p.relative_to(PROCEDURES)))
def test_shipped_procedure_is_valid(path: Path):
    assert validate_paths([path]) == []


def modeline_files() -> list[Path]:
    """Every YAML under procedures/ an editor checks: procedures and fragments (boards, limits have none)."""
    return sorted(
        p
        for p in PROCEDURES.rglob("*.yaml")
        if not {"boards", "limits"}.intersection(p.relative_to(PROCEDURES).parts)
    )


@pytest.mark.parametrize("path", modeline_files(), ids=lambda p: str(p.relative_to(PROCEDURES)))
def test_shipped_file_matches_the_schema_its_modeline_names(path: Path):
    # jsonschema (the reference implementation of draft 2020-12) reads the very file the modeline
    # names, as a YAML-aware editor does: a fragment under parts/ must not be marked red
    text = path.read_text()
    assert text.startswith("# yaml-language-server: $schema=")
    target = (path.parent / text.splitlines()[0].split("$schema=", 1)[1].strip()).resolve()
    fragment = "parts" in path.relative_to(PROCEDURES).parts
    expected = "fragment.schema.json" if fragment else "procedure.schema.json"
    assert target == PROCEDURES / expected
    schema = json.loads(target.read_text())
    jsonschema.Draft202012Validator(schema).validate(yaml.safe_load(text))


def test_schema_is_valid_draft_2020_12_and_the_shipped_file_is_current():
    schema = procedure_schema()
    jsonschema.Draft202012Validator.check_schema(schema)
    assert schema["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    assert json.loads((PROCEDURES / "procedure.schema.json").read_text()) == schema
    assert json.loads(schema_text()) == schema


def test_fragment_schema_is_valid_and_the_shipped_file_is_current():
    schema = fragment_schema()
    jsonschema.Draft202012Validator.check_schema(schema)
    assert json.loads((PROCEDURES / "fragment.schema.json").read_text()) == schema
    assert json.loads(schema_text(fragment=True)) == schema
    validator = jsonschema.Draft202012Validator(schema)
    fragment = {"name": "part", "steps": [{"wait": "1 s"}]}
    assert validator.is_valid(fragment)
    # a fragment may not carry what belongs to the including procedure
    assert not validator.is_valid({**fragment, "board_type": "PA8"})
    assert not validator.is_valid({**fragment, "cleanup": [{"wait": "1 s"}]})
    assert not validator.is_valid({"name": "part"})
    # and the procedure schema still wants a board type
    assert not jsonschema.Draft202012Validator(procedure_schema()).is_valid(fragment)


def test_schema_follows_the_kinds_table():
    step_keys = {option["required"][0] for option in procedure_schema()["$defs"]["step"]["anyOf"]}
    assert set(KINDS) <= step_keys
    validator = jsonschema.Draft202012Validator(procedure_schema())
    good = {"name": "x", "version": 1, "board_type": "PA8", "steps": [{"wait": "1 s"}]}
    assert validator.is_valid(good)
    assert not validator.is_valid({**good, "steps": [{"wait": {"secnds": 1}}]})
    assert not validator.is_valid({**good, "steps": [{"no.such.kind": 1}]})


def test_full_procedure_reads_includes_and_limits():
    procedure = load_procedure(DATA / "full.yaml")
    assert set(procedure.source_files()) == {"sub/scope-setup.yaml", "@limits/PA8.yaml"}
    assert (
        procedure.source_files()["sub/scope-setup.yaml"]
        == (DATA / "sub" / "scope-setup.yaml").read_text()
    )
    assert procedure.roles == (
        "pulser",
        "scope",
        "threshold",
        "counter",
        "bias",
        "switch",
    )  # inferred
    noise = [lim for lim in procedure.limits if lim.quantity == "noise_in_mV"]
    assert len(noise) == 1 and noise[0].high == 0.8  # inline overrides the file's 0.6 mV


def test_stored_text_reruns_without_the_files_on_disk(tmp_path: Path):
    original = load_procedure(DATA / "full.yaml")
    # a different folder with nothing in it: everything comes from the stored texts
    again = load_procedure_text(
        original.source_text, tmp_path / "stored.yaml", original.source_files()
    )
    board = board_info("PA8", "NR-PA8-0001")
    a, b = build_plan(original, board), build_plan(again, board)
    assert [(s.path, dict(s.args)) for s in a.steps] == [(s.path, dict(s.args)) for s in b.steps]
    assert a.limits == b.limits and a.sha256 == b.sha256


def test_stored_text_missing_a_file_is_located(tmp_path: Path):
    original = load_procedure(DATA / "full.yaml")
    files = {k: v for k, v in original.source_files().items() if k != "sub/scope-setup.yaml"}
    with pytest.raises(ProcedureError) as exc:
        load_procedure_text(original.source_text, "stored.yaml", files)
    assert str(exc.value).startswith("stored.yaml:19:14: cannot read sub/scope-setup.yaml")


def test_include_parameters_are_checked(tmp_path: Path):
    (tmp_path / "part.yaml").write_text(
        "name: part\nparameters: {n: 4}\nsteps:\n  - scope.average: '{n}'\n"
    )
    (tmp_path / "main.yaml").write_text(
        "name: m\nversion: 1\nboard_type: PA8\nsteps:\n  - include: part.yaml\n    with: {nn: 3}\n"
    )
    with pytest.raises(
        ProcedureError,
        match=r"main.yaml:6:12: part.yaml has no parameter 'nn' \(did you mean 'n'\?\)",
    ):
        load_procedure(tmp_path / "main.yaml")


def test_included_file_may_not_declare_limits(tmp_path: Path):
    (tmp_path / "part.yaml").write_text("name: part\nlimits: PA8\nsteps: []\n")
    (tmp_path / "main.yaml").write_text(
        "name: m\nversion: 1\nboard_type: PA8\nsteps:\n  - include: part.yaml\n"
    )
    with pytest.raises(
        ProcedureError, match=r"part.yaml:2:1: unknown key 'limits' in an included procedure"
    ):
        load_procedure(tmp_path / "main.yaml")


def test_unknown_board_type_is_located(tmp_path: Path):
    path = tmp_path / "p.yaml"
    path.write_text("name: p\nversion: 1\nboard_type: ZZ9\nsteps: []\n")
    problems = validate_paths([path])
    assert [str(p).split(": ")[0] for p in problems] == [f"{path}:3:13"]
    assert "ZZ9" in problems[0].message

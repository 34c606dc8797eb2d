"""Bad input, for every file the tool reads (procedure, bench, board, limits, dialect, batch, board
type): whatever the bytes, the loaders raise only the ``LocatedError`` family, every problem as
``file:line:column: message`` on one line; hostile YAML (alias bombs, Python tags, huge scalars, deep
nesting, devices) is refused fast; and the real CLI answers such files with exit 2, located lines
and no traceback.

The bulk of the examples go to the loaders directly (hypothesis: structure-aware mutations of the
shipped files, text edits, random bytes); a handful go through ``python -m sequencer`` for the exit
code and the one-line format.
"""

from __future__ import annotations

import tracemalloc
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from drivers.errors import LocatedError
from tests.reliability import kit
from tests.reliability.fuzzing import KINDS, edited_text, fuzz_file, mutated_text

QUICK = settings(
    max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow], database=None
)
THOROUGH = settings(
    max_examples=600, deadline=None, suppress_health_check=[HealthCheck.too_slow], database=None
)
#: Refusing a hostile file must allocate well under this (an alias bomb expanded would take
#: gigabytes).  Memory, not time: a count that is the same on an idle and on a loaded machine.  A
#: read that never ends (a device) is caught by the suite's hang guards, not by a clock here.
PEAK_BYTES = 32 * 2**20


def load_checked(kind: str, payload: str | bytes) -> None:
    """Load ``payload`` as a ``kind`` file: success, or LocatedError with well-formed problems."""
    loader, _ = KINDS[kind]
    file = fuzz_file(kind)
    try:
        loader(payload, file)
    except LocatedError as exc:
        assert exc.problems, "a LocatedError without a problem"
        for problem in exc.problems:
            line = str(problem)
            assert "\n" not in line and kit.LOCATED.match(line), repr(line)
            assert problem.location.line >= 1 and problem.location.column >= 1, line
            if kind != "procedure":  # a procedure's problems may sit in its limits file
                assert problem.location.file == file, line


ALL_KINDS = sorted(KINDS)


def seeds(kind: str) -> st.SearchStrategy[str]:
    return st.sampled_from(KINDS[kind][1])


def test_every_seed_file_loads() -> None:
    """The mutations start from valid files (else they would test nothing but the first error)."""
    for kind, (loader, texts) in KINDS.items():
        for text in texts:
            loader(text, fuzz_file(kind))


@pytest.mark.parametrize("kind", ALL_KINDS)
@QUICK
@given(data=st.data())
def test_structure_aware_mutations(kind: str, data: st.DataObject) -> None:
    load_checked(kind, mutated_text(data.draw(seeds(kind)), data))


@pytest.mark.parametrize("kind", ALL_KINDS)
@QUICK
@given(data=st.data())
def test_text_edits(kind: str, data: st.DataObject) -> None:
    load_checked(kind, edited_text(data.draw(seeds(kind)), data))


@pytest.mark.parametrize("kind", ALL_KINDS)
@QUICK
@given(payload=st.binary(max_size=3000))
def test_random_bytes(kind: str, payload: bytes) -> None:
    load_checked(kind, payload)


@pytest.mark.slow
@pytest.mark.parametrize("kind", ALL_KINDS)
@THOROUGH
@given(data=st.data())
def test_many_more_mutations(kind: str, data: st.DataObject) -> None:
    seed = data.draw(seeds(kind))
    text = mutated_text(seed, data) if data.draw(st.booleans()) else edited_text(seed, data)
    load_checked(kind, text)


# -- hostile YAML ----------------------------------------------------------------------------------

ALIAS_BOMB = "a: &a [x, x, x, x, x, x, x, x, x]\n" + "".join(
    f"{n}: &{n} [*{p}, *{p}, *{p}, *{p}, *{p}, *{p}, *{p}, *{p}, *{p}]\n"
    for p, n in zip("abcdefgh", "bcdefghi", strict=True)
)  # "billion laughs": 9^9 = 387,420,489 leaves once expanded, from 9 lines
WIDE_BOMB = "a: &a [" + ", ".join(["x"] * 50) + "]\n" + "b: [" + ", ".join(["*a"] * 190) + "]\n"
HOSTILE = {
    "alias bomb": ALIAS_BOMB,
    "many aliases": "a: &a x\nb: [" + ", ".join(["*a"] * 5000) + "]\n",
    "wide alias tree": WIDE_BOMB * 1,
    "python object tag": "!!python/object/apply:os.system ['touch pwned']\n",
    "python name tag": "name: !!python/name:os.system\nsteps: []\n",
    "custom tag": "name: !include other.yaml\n",
    "huge scalar": "name: " + "x" * 3_000_000 + "\n",
    "huge number": "seed: " + "9" * 100_000 + "\n",
    "deep nesting": "a: " + "[" * 5000 + "]" * 5000 + "\n",
    "deep mapping": "".join("  " * i + f"k{i}:\n" for i in range(200)) + "  " * 200 + "v\n",
    "merge key": "base: &b {x: 1}\nother:\n  <<: *b\n",
    "NUL byte": "name: a\x00b\n",
    "not UTF-8": b"name: \xff\xfe\xfa\n",
    "recursive alias": "&a [*a]\n",
}


@pytest.mark.parametrize("kind", ALL_KINDS)
@pytest.mark.parametrize("case", sorted(HOSTILE))
def test_hostile_yaml_is_refused_fast(kind: str, case: str, tmp_path: Path, monkeypatch) -> None:
    monkeypatch.chdir(tmp_path)  # a Python tag that ran would leave a file here
    loader, _ = KINDS[kind]
    tracemalloc.start()
    try:
        with pytest.raises(LocatedError) as caught:
            loader(HOSTILE[case], fuzz_file(kind))
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert peak < PEAK_BYTES, (case, peak)
    assert all(kit.LOCATED.match(str(p)) for p in caught.value.problems), caught.value
    assert not (tmp_path / "pwned").exists()


# -- through the real CLI ----------------------------------------------------------------------------


def located_lines(stderr: str) -> list[str]:
    lines = [line for line in stderr.splitlines() if line.strip()]
    assert lines, "no message on stderr"
    assert all(kit.LOCATED.match(line) for line in lines), stderr
    return lines


def test_cli_validate_refuses_bad_procedures(tmp_path: Path) -> None:
    """One ``validate`` of several hostile procedure files: exit 2, each file named, located."""
    limits = tmp_path / "bad-limits.yaml"
    limits.write_text("board_type: PA8\nlimits:\n  - {quantity: gain, low: high}\n")
    files = {
        "alias-bomb.yaml": ALIAS_BOMB,
        "python-tag.yaml": HOSTILE["python object tag"],
        "huge-scalar.yaml": HOSTILE["huge scalar"],
        "deep-nesting.yaml": HOSTILE["deep nesting"],
        "typo.yaml": "name: x\nversion: '1'\nboard_type: PA8\nsteps:\n  - pulser.amplitud: 10 mV\n",
        "device-include.yaml": "name: x\nversion: '1'\nboard_type: PA8\nsteps:\n  - include: /dev/zero\n",
        "bad-limits-ref.yaml": "name: x\nversion: '1'\nboard_type: PA8\nlimits: bad-limits.yaml\n"
        "steps:\n  - wait: 1 s\n",
    }
    for name, text in files.items():
        (tmp_path / name).write_text(text)
    (tmp_path / "random.yaml").write_bytes(bytes(range(256)) * 4)
    names = [*files, "random.yaml"]
    done = kit.run_cli("validate", *names, cwd=tmp_path, timeout_s=120)  # a hang guard only
    assert done.returncode == kit.EXIT_INPUT, done.stderr
    assert kit.no_traceback(done.stdout, done.stderr)
    lines = located_lines(done.stderr)
    for name in names:
        where = limits.name if name == "bad-limits-ref.yaml" else name  # located in the limits file
        assert any(line.startswith(f"{where}:") for line in lines), (name, done.stderr)
    assert any(line.startswith(f"{limits.name}:3:") for line in lines), done.stderr
    assert not (tmp_path / "pwned").exists()


@pytest.mark.parametrize(
    ("what", "option"), [("board", "--sim"), ("bench", "--bench"), ("dialect", "--bench")]
)
def test_cli_run_refuses_bad_instrument_files(tmp_path: Path, what: str, option: str) -> None:
    bad = tmp_path / f"bad-{what}.yaml"
    if what == "board":
        bad.write_text(kit.EXAMPLE_BOARD.read_text().replace("seed: 7", "seed: seven"))
        target = bad
    else:
        target = tmp_path / "bench.yaml"
        dialect = "generic"
        if what == "dialect":
            bad.write_text("dialect: broken\nversion: 1\nroles: {scope: {fetch: {query: 12}}}\n")
            dialect = bad.name
        else:
            bad = target
        target.write_text(
            kit.bench_text(dialect) if what == "dialect" else "bench: b\ninstruments: [scope]\n"
        )
    url = f"sqlite:///{tmp_path / 'results.db'}"
    done = kit.run_cli(
        "run",
        str(kit.PROCEDURE),
        option,
        str(target),
        "--board",
        "NR-PA8-0001",
        "--db",
        url,
        "--yes",
        cwd=tmp_path,
        timeout_s=60,
    )
    assert done.returncode == kit.EXIT_INPUT, done.stderr
    assert kit.no_traceback(done.stdout, done.stderr)
    lines = located_lines(done.stderr)
    assert any(line.startswith(f"{bad}:") for line in lines), done.stderr


def test_cli_batch_refuses_a_bad_batch_file(tmp_path: Path) -> None:
    batch = tmp_path / "batch.yaml"
    batch.write_text("batch: W1\nprocedure: p.yaml\nboards:\n  - {serial: 'no spaces allowed'}\n")
    done = kit.run_cli(
        "batch", str(batch), "--sim-dir", str(tmp_path), "--yes", cwd=tmp_path, timeout_s=60
    )
    assert done.returncode == kit.EXIT_INPUT, done.stderr
    assert kit.no_traceback(done.stdout, done.stderr)
    assert any(line.startswith(f"{batch}:4:") for line in located_lines(done.stderr)), done.stderr

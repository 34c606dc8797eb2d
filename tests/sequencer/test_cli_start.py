"""A command that only reads the store does not import the heavy libraries (issue 21 item 4).

Checked by module names in ``sys.modules`` of a new interpreter after the ``benchwright`` entry point
ran ``runs`` on a real (small) SQLite database: order and membership, no timing.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from sequencer.store import Store

HEAVY = ("matplotlib", "scipy", "pyvisa")
# an SQLite store is read with the standard library (store.light): no database toolkit either
STORE_TOOLKIT = ("sqlalchemy", "alembic", "numpy")

PROBE = """
import json, sys
from sequencer.cli import main
sys.argv = ["benchwright", *sys.argv[1:]]
try:
    main()
except SystemExit as exit_:
    code = exit_.code
else:
    code = 0
print(json.dumps({"code": code, "modules": sorted({m.split(".")[0] for m in sys.modules})}))
"""


def _run_entry_point(*args: str) -> dict:
    done = subprocess.run([sys.executable, "-c", PROBE, *args], capture_output=True, text=True,
                          timeout=120, check=True)
    return json.loads(done.stdout.strip().splitlines()[-1])


@pytest.mark.parametrize("command", [("runs",), ("batches",), ("export", "--format", "csv")])
def test_read_only_commands_import_neither_plotting_nor_analysis_nor_visa(
    tmp_path: Path, command: tuple[str, ...]
) -> None:
    url = f"sqlite:///{tmp_path / 'small.db'}"
    with Store.open(url):
        pass
    seen = _run_entry_point(*command, "--db", url)
    assert seen["code"] == 0
    assert "sqlite3" in seen["modules"]          # the command did open the store
    assert [m for m in HEAVY + STORE_TOOLKIT if m in seen["modules"]] == []


@pytest.mark.parametrize(("command", "code"), [
    (("trend", "--board", "NR-PA8-0001", "--quantity", "gain"), 2),  # no such board
    (("report", "--batch", "NR-B07"), 2),  # no such batch
    (("certify", "--run", "1"), 2),  # no such run (--out is added below)
])
def test_reporting_commands_do_not_compose_a_run(
    tmp_path: Path, command: tuple[str, ...], code: int
) -> None:
    # trend, report and certify read the store and draw: they need SQLAlchemy and numpy, not the
    # engine, scipy or pyvisa that ``compose`` pulls in.  On an empty database each answers after
    # opening the store, which is the start-up checked here.
    url = f"sqlite:///{tmp_path / 'small.db'}"
    with Store.open(url):
        pass
    out = ("--out", str(tmp_path / "certs")) if command[0] == "certify" else ()
    seen = _run_entry_point(*command, *out, "--db", url)
    assert seen["code"] == code
    assert "sqlalchemy" in seen["modules"]
    assert [m for m in ("scipy", "pyvisa") if m in seen["modules"]] == []


def test_a_store_the_light_path_cannot_read_goes_through_sqlalchemy(tmp_path: Path) -> None:
    # Control for the test above: a URL with driver options (here pysqlite's busy timeout) is
    # left to the Store, so the same probe sees SQLAlchemy and alembic loaded -- and the command
    # still answers.
    url = f"sqlite:///{tmp_path / 'small.db'}"
    with Store.open(url):
        pass
    seen = _run_entry_point("runs", "--db", url + "?timeout=20")
    assert seen["code"] == 0
    assert {"sqlalchemy", "alembic"} <= set(seen["modules"])


def test_the_probe_sees_heavy_modules_when_a_command_needs_them() -> None:
    # Control: ``plan`` composes a run (engine, analysis), so scipy is loaded -- the probe above
    # would see a heavy import if a read-only command made one.
    procedure = Path(__file__).resolve().parents[2] / "procedures" / "noise.yaml"
    seen = _run_entry_point("plan", str(procedure))
    assert seen["code"] == 0
    assert "scipy" in seen["modules"]


def test_help_lists_the_lazily_attached_commands() -> None:
    done = subprocess.run([sys.executable, "-m", "sequencer", "--help"], capture_output=True,
                          text=True, timeout=120, check=True)
    listed = {line.split()[0] for line in done.stdout.split("Commands:")[1].splitlines() if line.strip()}
    assert {"runs", "batches", "export", "verify", "certify", "batch", "demo", "run", "plan"} <= listed

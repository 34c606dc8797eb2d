"""Hostile files and options at the command line (issue 19 items 4-8): each refused with exit 2
(DESIGN.md: bad input) and one located line ``file:line:column: message``, never a traceback."""

from __future__ import annotations

import re
from pathlib import Path

from click.testing import CliRunner

from sequencer.cli import attach_commands, cli

LOCATED = re.compile(r"^(?P<file>[^:]+):(?P<line>\d+):(?P<col>\d+): .+$")

attach_commands()


def invoke(*args: str) -> tuple[int, str, str]:
    result = CliRunner().invoke(cli, list(args), catch_exceptions=False)
    return result.exit_code, result.stdout, result.stderr


def test_visa_library_path_in_a_bench_file_is_refused_without_the_option(tmp_path: Path) -> None:
    bench = tmp_path / "bench.yaml"
    bench.write_text(
        "bench: b\ninstruments:\n"
        '  pulser: {address: "TCPIP0::127.0.0.1::1::SOCKET", visa_library: "/tmp/x/lib.so"}\n'
    )
    code, _, err = invoke("instruments", "--bench", str(bench))
    assert code == 2, err
    m = LOCATED.match(err.strip())
    assert m and m["file"] == str(bench) and (m["line"], m["col"]) == ("3", "67"), err
    assert "--allow-visa-library" in err and "Traceback" not in err


def test_allowed_visa_library_passes_the_bench_check(tmp_path: Path) -> None:
    """With the option the file is accepted; opening a library that is not there is then an
    instrument fault (exit 3), not bad input: the permission worked."""
    bench = tmp_path / "bench.yaml"
    lib = tmp_path / "missing-visa.so"
    bench.write_text(
        f'bench: b\ninstruments:\n  pulser: {{address: "TCPIP0::127.0.0.1::1::SOCKET", visa_library: "{lib}"}}\n'
    )
    code, out, err = invoke("instruments", "--bench", str(bench), "--allow-visa-library", str(lib))
    assert code == 3, (out, err)
    assert "not a named backend" not in err


def test_bench_address_with_a_newline_is_bad_input_located(tmp_path: Path) -> None:
    bench = tmp_path / "bench.yaml"
    bench.write_text('bench: b\ninstruments:\n  pulser: {address: "TCPIP0::127.0.0.1::1::SOCKET\\n*RST"}\n')
    code, _, err = invoke("instruments", "--bench", str(bench))
    assert code == 2, err
    m = LOCATED.match(err.strip())
    assert m and (m["line"], m["col"]) == ("3", "21") and "control character" in err, err


# -- storage faults at the command line ----------------------------------------------------------

ROOT = Path(__file__).resolve().parents[2]
QUICK = ROOT / "procedures" / "examples" / "quick-gain.yaml"
BOARD = ROOT / "drivers" / "sim" / "boards" / "example-pa8.yaml"


def test_a_log_on_a_full_device_stops_the_run_cleanly(tmp_path: Path) -> None:
    """/dev/full: every write fails with ENOSPC (Linux null(4) man page), as on a full disk."""
    from sequencer.store import Store

    url = f"sqlite:///{tmp_path / 'results.db'}"
    code, _, err = invoke("run", str(QUICK), "--sim", str(BOARD), "--db", url, "--yes",
                          "--log", "/dev/full")
    assert code == 3, err
    last = [line for line in err.splitlines() if line.strip()][-1]
    assert last.startswith("aborted: cannot write the run log /dev/full: No space left on device")
    with Store.open(url, create=False) as store:
        (run,) = store.list_runs()
        steps = store.steps(run.id)
    assert run.status == "aborted" and "run log" in run.reason
    assert [s.path for s in steps if s.path.startswith("cleanup/")]  # the cleanup block ran


def test_verify_of_a_file_that_is_no_certificate_is_bad_input(tmp_path: Path) -> None:
    other = tmp_path / "notes.pdf"
    other.write_bytes(b"not a pdf at all")
    from sequencer.store import Store

    url = f"sqlite:///{tmp_path / 'results.db'}"
    Store.open(url).close()  # an empty results database
    code, _, err = invoke("verify", str(other), "--db", url)
    assert code == 2, err
    assert LOCATED.match(err.strip()) and "not a benchwright certificate" in err, err

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

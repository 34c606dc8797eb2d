"""The command line on light-sensor files: the shipped SiPM example runs end to end through
``benchwright run --sim`` (exit 0, PASS), and a sensor file whose sensor count differs from the
type's channels is refused before any instrument is touched (exit 2, located).  Slow: real-time
bias ramps."""

from __future__ import annotations

from pathlib import Path

import pytest
import yaml
from click.testing import CliRunner

from sequencer.cli import attach_commands, cli

ROOT = Path(__file__).resolve().parents[2]
SIPM = ROOT / "procedures" / "sipm-characterise.yaml"
MODULE = ROOT / "procedures" / "module-cosmics.yaml"
EXAMPLE = ROOT / "drivers" / "sim" / "boards" / "example-sipm.yaml"

attach_commands()


def invoke(*args: str) -> tuple[int, str, str]:
    result = CliRunner().invoke(cli, list(args), catch_exceptions=False)
    return result.exit_code, result.stdout, result.stderr


def test_a_sensor_file_that_does_not_fit_the_type_is_refused(tmp_path: Path) -> None:
    # module-cosmics plans two channels (type SM2); the example SiPM file has one sensor
    code, _, err = invoke(
        "run",
        str(MODULE),
        "--sim",
        str(EXAMPLE),
        "--board",
        "LX-S3-0001",
        "--db",
        f"sqlite:///{tmp_path / 'r.db'}",
        "--yes",
    )
    assert code == 2
    assert f"{EXAMPLE}:1:1: board LX-S3-0001: 1 sensors, but type SM2 has 2 channels" in err


@pytest.mark.slow
def test_the_shipped_sipm_example_runs_from_the_command_line(tmp_path: Path) -> None:
    serial = yaml.safe_load(EXAMPLE.read_text())["serial"]
    code, out, err = invoke(
        "run",
        str(SIPM),
        "--sim",
        str(EXAMPLE),
        "--board",
        serial,
        "--db",
        f"sqlite:///{tmp_path / 'r.db'}",
        "--yes",
    )
    assert code == 0, err
    assert "10 measurement(s), PASS" in out  # fingers 5, breakdown 3, staircase 2

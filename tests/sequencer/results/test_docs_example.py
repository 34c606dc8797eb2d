"""docs/results_example.py runs against a real database and says what it claims (the docs stay true)."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[3]


def test_the_example_script_runs(recorded, tmp_path: Path) -> None:
    url, _ = recorded
    done = subprocess.run(
        [sys.executable, str(ROOT / "docs" / "results_example.py"), url, "NR-B07", str(tmp_path)],
        capture_output=True, text=True, timeout=600, cwd=tmp_path, env={"MPLBACKEND": "Agg", "PATH": ""},
    )  # fmt: skip
    assert done.returncode == 0, done.stderr
    assert "largest residual" in done.stdout  # transfer points with residuals
    assert (tmp_path / "measurements.parquet").stat().st_size > 0
    assert (tmp_path / "batch.root").stat().st_size > 0
    assert "NR-PA8-0002    0.6" in done.stdout  # one of its 3 channels has a gain 30 % high: 2/3

"""A run killed with SIGKILL at several points resumes (real store, real sockets, a child process)
to the same set of measurements as an uninterrupted run."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
from pathlib import Path

import pytest

from drivers.sim import start_sim_bench
from sequencer.store import Store
from tests.integration.test_engine_sim import board

ROOT = Path(__file__).resolve().parents[2]


def child(bench: Path, url: str, run: str, kill_after: int) -> tuple[int, int]:
    proc = subprocess.run(
        [
            sys.executable,
            "-m",
            "tests.integration.engine_child",
            str(bench),
            url,
            run,
            str(kill_after),
        ],
        cwd=ROOT,
        capture_output=True,
        text=True,
        timeout=120,
        env={**os.environ, "PYTHONPATH": str(ROOT)},
    )
    first = proc.stdout.splitlines()[0] if proc.stdout else ""
    assert first.isdigit(), proc.stderr
    return int(first), proc.returncode


def measured(url: str, run_id: int) -> dict[tuple, tuple[float, float | None]]:
    with Store.open(url) as store:
        return {
            (m.quantity, m.channel, m.output, m.aggressor): (m.value, m.uncertainty)
            for m in store.measurements(run_id=run_id)
        }


def same_within_noise(got, ref) -> bool:
    """Fresh acquisitions after the kill see new noise: agree within 5 combined standard
    uncertainties where the analysis gives one (common practice), else 5 % / 0.5 abs."""
    (v1, u1), (v2, u2) = got, ref
    if u1 is not None and u2 is not None:
        return abs(v1 - v2) <= 5.0 * (u1**2 + u2**2) ** 0.5
    return v1 == pytest.approx(v2, rel=0.05, abs=0.5)


def kill_and_resume(tmp_path, bench, reference, kill_after):
    url = f"sqlite:///{tmp_path / f'kill{kill_after}.db'}"
    run_id, rc = child(bench, url, "new", kill_after)
    assert rc == -signal.SIGKILL
    with Store.open(url) as store:
        assert len(store.completed_steps(run_id)) == kill_after
    again, rc = child(bench, url, str(run_id), -1)
    assert (again, rc) == (run_id, 0)
    got = measured(url, run_id)
    assert set(got) == set(reference), kill_after
    for key, value in reference.items():
        assert same_within_noise(got[key], value), (kill_after, key, got[key], value)
    with Store.open(url) as store:
        assert store.get_run(run_id).status == "completed"


def reference_run(tmp_path, bench):
    ref_url = f"sqlite:///{tmp_path / 'ref.db'}"
    ref_id, rc = child(bench, ref_url, "new", -1)
    assert rc == 0
    reference = measured(ref_url, ref_id)
    assert {q for q, *_ in reference} == {"gain", "offset_mV", "inl_pct", "leakage_nA"}
    return reference


def test_sigkill_mid_scan_resumes_to_the_same_measurements(tmp_path):
    with start_sim_bench(board()) as sim:
        bench = sim.write_bench(tmp_path / "bench.yaml")
        kill_and_resume(tmp_path, bench, reference_run(tmp_path, bench), 11)


@pytest.mark.slow
def test_sigkill_at_several_points_resumes_to_the_same_measurements(tmp_path):
    with start_sim_bench(board()) as sim:
        bench = sim.write_bench(tmp_path / "bench.yaml")
        reference = reference_run(tmp_path, bench)
        for kill_after in (3, 9, 18, 19):  # setup, mid-scan, after the analysis, biased at 3 V
            kill_and_resume(tmp_path, bench, reference, kill_after)

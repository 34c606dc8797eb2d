"""One certificate pool for several runs (issue 21 item 5): what the pool writes is byte for byte
what the same data rendered in this process gives (the in-process renderer is the reference: the
PDFs are deterministic), every run submitted is written, and progress is counted to the total.
Order and counts are asserted, no times."""

from __future__ import annotations

from pathlib import Path

from sequencer.reports import certify_run
from sequencer.reports.certify_pool import CertificatePool

from .simulated_runs import RunSpec, record_run


def test_two_runs_in_one_pool_equal_in_process_rendering(store, tmp_path: Path) -> None:
    first = record_run(store, RunSpec(channels=3, board="NR-PA8-0001"))
    second = record_run(store, RunSpec(channels=2, board="NR-PA8-0002", gain_scale={2: 1.3}))
    told: list[tuple[int, int]] = []
    with CertificatePool(2, on_progress=lambda done, total, _left: told.append((done, total))) as pool:
        queued = pool.submit_run(store, first, tmp_path / "pool")
        queued += pool.submit_run(store, second, tmp_path / "pool")
        written = pool.wait()
    single = [*certify_run(store, first, tmp_path / "single", workers=1),
              *certify_run(store, second, tmp_path / "single", workers=1)]
    assert written == queued
    assert [p.name for p in written] == [p.name for p in single]
    assert len(written) == 2 * (3 + 2)  # a PDF and an HTML per channel
    for ours, reference in zip(written, single, strict=True):
        assert ours.read_bytes() == reference.read_bytes()
    dones = [d for d, _ in told]
    assert dones == sorted(dones) and told[-1] == (5, 5)


def test_certify_run_through_the_pool_reports_progress_to_the_end(store, tmp_path: Path) -> None:
    run_id = record_run(store, RunSpec(channels=6))
    told: list[tuple[int, int]] = []
    paths = certify_run(store, run_id, tmp_path, workers=2, on_progress=lambda d, t: told.append((d, t)))
    assert len(paths) == 12 and all(p.exists() for p in paths)
    assert told[-1] == (6, 6)


SCRIPT = """
import sys
from pathlib import Path
from sequencer.reports import certify_run
from sequencer.store import Store

def main():
    with Store.open(sys.argv[1], create=False) as store:
        print(len(certify_run(store, 1, Path(sys.argv[2]), workers=2)), "written")

{call}
"""


def test_a_script_without_the_main_guard_is_told_about_it(store, tmp_path: Path) -> None:
    # Python's multiprocessing documentation ("Safe importing of main module"): under forkserver and
    # spawn a worker imports the script, so an unguarded call runs again in it and the pool breaks.
    # The error names the guard; the same script with the guard writes every certificate (control).
    import subprocess
    import sys

    record_run(store, RunSpec(channels=6))
    url = str(store.engine.url)
    outcomes = {}
    for name, call in (("unguarded", "main()"), ("guarded", 'if __name__ == "__main__":\n    main()')):
        script = tmp_path / f"{name}.py"
        script.write_text(SCRIPT.format(call=call))
        outcomes[name] = subprocess.run([sys.executable, str(script), url, str(tmp_path / name)],
                                        capture_output=True, text=True, timeout=600)
    guarded, unguarded = outcomes["guarded"], outcomes["unguarded"]
    assert guarded.returncode == 0, guarded.stderr
    assert guarded.stdout.strip() == "12 written"
    assert unguarded.returncode != 0
    assert "if __name__ == \"__main__\":" in unguarded.stderr and "workers=1" in unguarded.stderr

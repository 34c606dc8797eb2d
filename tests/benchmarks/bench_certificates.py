"""Benchmark ``certificates``: PDF + HTML certificates of a 32-channel run, goal < 5 s (issue 21).

The run is recorded into a fresh SQLite file through the store's API (not timed).  ``ours`` is
``certify_run`` with its default process pool (``CertificatePool``: the CPU count of
workers, each set up once with its figures); ``baseline`` is the same call rendering in this one
process (``workers=1``), measured in the same run on the same data.  Both include reading the run
from the store (after one untimed read that pays the one-time import of scipy by the analysis
package); both start from cold figures (a new Plotter per call), the pool from cold workers.
"""

from __future__ import annotations

import tempfile
import time
from pathlib import Path

CHANNELS = 32
GOAL_S = 5.0


def _timed(fn) -> float:
    t0 = time.perf_counter()
    fn()
    return time.perf_counter() - t0


def run() -> list[dict]:
    from sequencer.reports import certify_run, gather_certificates
    from sequencer.store import Store
    from tests.sequencer.reports.simulated_runs import RunSpec, record_run

    with tempfile.TemporaryDirectory() as tmp:
        base = Path(tmp)
        with Store.open(f"sqlite:///{base / 'results.db'}") as store:
            run_id = record_run(store, RunSpec(channels=CHANNELS, gain_scale={7: 1.3}))
            gather_certificates(store, run_id)  # warm-up: imports, not timed
            ours = _timed(lambda: certify_run(store, run_id, base / "pool"))
            single = _timed(lambda: certify_run(store, run_id, base / "single", workers=1))
            written = len(list((base / "pool").glob("*.pdf")))
    if written != CHANNELS:
        raise RuntimeError(f"expected {CHANNELS} PDF certificates, found {written}")
    return [
        {
            "name": "certificates",
            "ours": round(ours, 2),
            "baseline": round(single, 2),
            "unit": f"s for {CHANNELS} channels (PDF+HTML)",
            "ratio": round(single / ours, 2),
            "goal": f"< {GOAL_S:g} s",
            "verdict": "met" if ours < GOAL_S else "short",
        }
    ]

"""A bench writing runs to a shared database, as a separate process (run by the concurrency tests).

    python writer_proc.py URL LABEL --runs R --steps S --per-step M [--go FILE] [--hang-after K]
                          [--pause SECONDS]

Touches FILE.LABEL.ready, waits for FILE to exist (so several writers start together), opens the store (which may migrate a new
database), records R runs of S completed steps with M measurements and one trace each, and a safety
event per step, and prints "done START END" (wall clock).  ``--hang-after K`` writes K steps, starts step K+1 (buffered only), prints "hang" and
sleeps: the test kills it there.  Without it, steps are written until the process is killed if S is 0.
"""

from __future__ import annotations

import argparse
import sys
import time
from datetime import timedelta
from pathlib import Path

sys.path.insert(0, str(Path(__file__).parent))

from scenario import T0, finished, run_info, safety, step_events

from sequencer.store import Store

GO_TIMEOUT_S = 30.0


def main() -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("url")
    ap.add_argument("label")
    ap.add_argument("--runs", type=int, default=1)
    ap.add_argument("--steps", type=int, default=10)
    ap.add_argument("--per-step", type=int, default=10)
    ap.add_argument("--go", default="")
    ap.add_argument("--hang-after", type=int, default=-1)
    ap.add_argument(
        "--pause", type=float, default=0.0, help="seconds between steps (a step's work)"
    )
    a = ap.parse_args()
    if a.go:
        Path(f"{a.go}.{a.label}.ready").touch()
        deadline = time.monotonic() + GO_TIMEOUT_S
        while not Path(a.go).exists():
            if time.monotonic() > deadline:
                return 3
            time.sleep(0.005)
    began = time.time()
    with Store.open(a.url) as store:
        for r in range(a.runs):
            run_id = store.create_run(run_info(f"NR-PA8-{a.label}"), T0 + timedelta(hours=r))
            step = 0
            while a.steps == 0 or step < a.steps:
                path = f"scan/{step}"
                if step == a.hang_after:
                    for e in step_events(run_id, path, index=step, n_measurements=a.per_step)[:-1]:
                        store.handle(e)
                    print("hang", run_id, flush=True)
                    time.sleep(60)
                    return 4
                store.handle(safety(run_id, path))
                for e in step_events(
                    run_id, path, index=step, n_measurements=a.per_step, seed=step
                ):
                    store.handle(e)
                step += 1
                time.sleep(a.pause)
            store.handle(finished(run_id))
    print("done", began, time.time(), flush=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())

"""A run in a child process for the SIGKILL/resume test: ``python -m tests.integration.engine_child
BENCH.yaml DB_URL RUN_ID|new KILL_AFTER`` (KILL_AFTER = completed steps before SIGKILL, -1 = never).
Prints the run id on its first line."""

from __future__ import annotations

import os
import signal
import sys
from datetime import UTC, datetime

from drivers.bench import load_bench, open_bench
from sequencer.engine import Runner, RunOptions, describe_run
from sequencer.events import StepFinished
from sequencer.store import Store
from tests.integration.test_engine_sim import gain_plan


def main(bench_file: str, url: str, run: str, kill_after: int) -> int:
    plan = gain_plan()
    store = Store.open(url)
    with open_bench(load_bench(bench_file)) as bench:
        info = describe_run(plan, bench, operator="kill-test")
        if run == "new":
            run_id, completed = store.create_run(info, datetime.now(UTC)), None
        else:
            run_id = int(run)
            store.reopen_run(run_id)
            completed = store.completed_steps(run_id)
        print(run_id, flush=True)
        done = 0

        def killer(event: object) -> None:
            nonlocal done
            if isinstance(event, StepFinished) and event.status == "completed":
                done += 1
                if done == kill_after:
                    os.kill(os.getpid(), signal.SIGKILL)

        options = RunOptions(operator="kill-test", unattended=True, ramp_poll_s=0.02)
        Runner(
            plan,
            bench,
            run_id=run_id,
            subscribers=[store.subscriber, killer],
            options=options,
            completed=completed,
            info=info,
        ).run()
    store.close()
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1], sys.argv[2], sys.argv[3], int(sys.argv[4])))

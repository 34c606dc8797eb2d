"""Progress of certificates and the demo: plain lines off a terminal, the callback of certify_run."""

from __future__ import annotations

import io
import re

from sequencer.cli_progress import counting


def test_plain_lines_at_every_tenth_and_the_end():
    out = io.StringIO()
    with counting("certificates", stream=out, force_terminal=False) as progress:
        for done in range(1, 21):
            progress(done, 20)
    lines = out.getvalue().splitlines()
    assert len(lines) == 11  # the first, then 2/20, 4/20, ... 20/20: one line per tenth
    assert lines[0].startswith("certificates: 1/20") and lines[-1] == "certificates: 20/20"
    assert all(re.fullmatch(r"certificates: \d+/20(, (about|less than) .+ left at the pace so far)?", line) for line in lines)
    assert "\x1b" not in out.getvalue()


def test_certify_run_reports_each_certificate(tmp_path):
    from sequencer.reports import certify_run
    from sequencer.store import Store
    from tests.sequencer.reports.simulated_runs import RunSpec, record_run

    seen: list[tuple[int, int]] = []
    with Store.open(f"sqlite:///{tmp_path / 'r.db'}") as store:
        run_id = record_run(store, RunSpec(channels=2, full=False))
        paths = certify_run(store, run_id, tmp_path / "certs", workers=1,
                            on_progress=lambda done, total: seen.append((done, total)))  # fmt: skip
    assert seen == [(1, 2), (2, 2)]
    assert [p.suffix for p in paths] == [".pdf", ".html", ".pdf", ".html"]

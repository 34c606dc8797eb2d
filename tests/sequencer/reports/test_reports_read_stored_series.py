"""Reports draw what the engine stored and never re-run an analysis (issue 16, STYLE.md rule 17):
no module of ``sequencer/reports`` imports ``sequencer.analysis``, and a certificate's curves are
exactly the series kept with the analysis steps."""

from __future__ import annotations

import ast
from pathlib import Path

from sequencer.reports import gather_certificates
from sequencer.store import Store

from .simulated_runs import RunSpec, record_run

REPORTS = Path(__file__).resolve().parents[3] / "sequencer" / "reports"


def _imports(path: Path) -> set[str]:
    names: set[str] = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            names.update(a.name for a in node.names)
        elif isinstance(node, ast.ImportFrom) and node.module:
            if node.level:  # from ..analysis import x
                names.add("." * node.level + node.module)
            elif node.module == "sequencer":
                names.update(f"sequencer.{a.name}" for a in node.names)
            else:
                names.add(node.module)
    return names


def test_no_report_imports_the_analysis_package():
    offenders = {
        f"{path.name} imports {name}"
        for path in sorted(REPORTS.rglob("*.py"))
        for name in _imports(path)
        if name == "sequencer.analysis" or name.startswith("sequencer.analysis.")
        or name.lstrip(".") == "analysis" or name.lstrip(".").startswith("analysis.")
    }
    assert offenders == set()


def test_the_import_check_sees_an_analysis_import(tmp_path):
    # the check above can fail: the same scan finds each form of import in a sample file
    sample = tmp_path / "sample.py"
    sample.write_text(
        "from sequencer.analysis import fit_line\nimport sequencer.analysis.lines\n"
        "from sequencer import analysis\n"
    )
    assert _imports(sample) >= {"sequencer.analysis", "sequencer.analysis.lines"}


def test_certificate_curves_are_the_stored_series(tmp_path):
    with Store.open(f"sqlite:///{tmp_path / 'r.db'}") as store:
        run_id = record_run(store, RunSpec(channels=2))
        data = gather_certificates(store, run_id)[0]
        steps = store.completed_steps(run_id)
    stored = steps["gain/ch1/x5/transfer"].results["series"][0]
    [curve] = [c for c in data.transfer if c.output == "x5"]
    assert list(curve.amplitudes_mV) == stored["x_mV"]
    assert list(curve.heights_mV) == stored["y_mV"]
    assert list(curve.residuals_mV) == stored["residual_mV"]
    assert curve.gain == stored["gain"]
    [s_curve] = data.s_curves
    fit = steps["scurve/ch1/fit"].results["series"][0]
    assert (list(s_curve.counts), s_curve.threshold_mV) == (fit["counts"], fit["mu_mV"])
    [pulse] = data.pulses
    assert list(pulse.samples_mV) == steps["shape/ch1/peaking"].results["series"][0]["mean_mV"]

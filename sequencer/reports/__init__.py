"""Reports read from the results store (never instruments, never the engine).

::

    certify_run(store, run_id, out_dir, *, workers=None) -> list[Path]     # PDF + HTML per channel
        (a process pool: from a script, call it under ``if __name__ == "__main__":``)
    verify_certificate(store, path) -> VerifyResult(ok, differences)
    batch_summary(store, batch) -> BatchSummary     (.to_text() for the terminal)
    batch_report(store, batch, out_dir) -> list[Path]                     # PDF + HTML
    trend(store, board, quantity, *, channel=None, output=None, reference_runs=5, band=None)
        -> TrendResult;  plot_trend(result, path) -> Path;  trend_csv(result) -> str

Plotting (matplotlib, Agg) and PDF (fpdf2) are imported only where used.
"""

from .batch_report import BatchSummary, batch_report, batch_summary, format_summary
from .certificate_data import CertificateData, certificate_number, gather_certificates
from .certify import certify_run
from .trend import TrendResult, plot_trend, plot_trends, trend, trend_csv, trends
from .verify import VerifyResult, verify_certificate

__all__ = [
    "BatchSummary",
    "CertificateData",
    "TrendResult",
    "VerifyResult",
    "batch_report",
    "batch_summary",
    "certificate_number",
    "certify_run",
    "format_summary",
    "gather_certificates",
    "plot_trend",
    "plot_trends",
    "trend",
    "trend_csv",
    "trends",
    "verify_certificate",
]

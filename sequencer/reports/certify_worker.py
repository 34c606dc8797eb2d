"""What a certificate worker process holds: the renderers imported and one Plotter with its figures
built, set up at import.

Each worker of the certificate pool imports this module once, as it starts (the pool's
initializer), and renders every task with the same figures.  Imported only in those processes.
"""

from __future__ import annotations

import matplotlib

matplotlib.use("Agg")

from . import certificate_html, certificate_pdf, spectra  # noqa: F401  (loaded here, once)
from .certificate_data import CertificateData
from .plots import Plotter

PLOTTER = Plotter()
for _kind in ("transfer", "s_curve", "pulse", "crosstalk"):  # a certificate's figures
    PLOTTER._get(_kind)  # built now, before the fork


def render(datas: list[CertificateData], out_dir: str, paper: str) -> list[str]:
    """Render ``datas`` with this process's Plotter; PDF then HTML paths."""
    from .certify import render_certificates

    return render_certificates(datas, out_dir, paper, plotter=PLOTTER)

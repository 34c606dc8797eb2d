"""``certify_run``: the certificates of a run, one PDF and one HTML per channel.

The data of every channel is read from the store in this process (one snapshot of the run); the
rendering (plots, PDF, HTML) runs in a :class:`~sequencer.reports.certify_pool.CertificatePool`
whose workers build their figures once and reuse them for every certificate they draw.
"""

from __future__ import annotations

import os
import re
from collections.abc import Callable
from pathlib import Path
from typing import Any

from .certificate_data import CertificateData, gather_certificates
from .reading import StoreReader

MIN_PER_WORKER = 3
"""Below this many certificates per worker, starting a pool costs more than it saves."""

_UNSAFE = re.compile(r"[^A-Za-z0-9._-]+")


def certificate_stem(data: CertificateData) -> str:
    """File name (without suffix) of a certificate: its number, made safe for any filesystem."""
    return _UNSAFE.sub("_", data.number)


def certify_run(
    store: StoreReader,
    run_id: int,
    out_dir: Path | str,
    *,
    workers: int | None = None,
    paper: str = "A4",
    on_progress: Callable[[int, int], None] | None = None,
) -> list[Path]:
    """Write ``<number>.pdf`` and ``<number>.html`` for every channel of run ``run_id`` into
    ``out_dir``; returns the paths, PDF then HTML per channel, in channel order.

    ``workers``: processes to render with (default: the CPU count, through a
    :class:`~sequencer.reports.certify_pool.CertificatePool`); 1 renders in this process.
    More than one worker from a script: call this under ``if __name__ == "__main__":`` (each
    worker process starts by importing the script; ``certify_pool`` module docstring).
    ``on_progress(done, total)`` is called as certificates are written.
    """
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    datas = gather_certificates(store, run_id)
    if not datas:
        return []
    n = max(1, min(workers or os.cpu_count() or 1, len(datas) // MIN_PER_WORKER or 1))
    report = on_progress or (lambda done, total: None)
    if n == 1:  # one at a time, so that progress can be told
        written_here: list[Path] = []
        plotter = None
        for i, data in enumerate(datas, start=1):
            if plotter is None:
                from .plots import Plotter

                plotter = Plotter()
            written_here += [Path(p) for p in render_certificates([data], str(out), paper, plotter=plotter)]
            report(i, len(datas))
        return written_here
    from .certify_pool import CertificatePool

    with CertificatePool(n, paper=paper, on_progress=lambda d, t, _left: report(d, t),
                         fine_progress=on_progress is not None) as pool:
        pool.submit(datas, out)
        return pool.wait()


def render_certificates(
    datas: list[CertificateData], out_dir: str, paper: str = "A4", *, plotter: Any = None
) -> list[str]:
    """Render ``datas`` with one :class:`~sequencer.reports.plots.Plotter` (``plotter``, or a new
    one); PDF then HTML paths."""
    from .certificate_html import render_html
    from .certificate_pdf import render_pdf
    from .plots import Plotter
    from .spectra import plot_spectra

    plotter = plotter or Plotter()
    written: list[str] = []
    for d in datas:
        images = {
            "transfer": plotter.transfer(d.transfer),
            "s_curves": plotter.s_curves(d.s_curves),
            "pulses": plotter.pulses(d.pulses),
            "crosstalk": plotter.crosstalk(d.crosstalk_out, d.channel),
            "spectra": plot_spectra(d.spectra),
        }
        stem = certificate_stem(d)
        pdf = render_pdf(d, images, Path(out_dir) / f"{stem}.pdf", paper=paper)
        html = render_html(d, images, Path(out_dir) / f"{stem}.html")
        written += [str(pdf), str(html)]
    return written

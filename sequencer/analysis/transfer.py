"""Transfer-curve analysis: gain, offset, integral nonlinearity and dynamic range of an output.

The curve is output pulse height (mV) against injected amplitude (mV) from an amplitude scan.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from ._checks import as_points, positive, same_length
from .lines import MIN_LINE_POINTS, LineFit, fit_line, percent_of_span

DEFAULT_DEVIATION_PCT = 1.0


@dataclass(frozen=True, eq=False)
class TransferFit:
    """Figures of one transfer curve; ``fit`` is the line over all points.

    ``gain`` (V/V) and ``offset_mV`` are the slope and intercept of that line with their one-sigma
    errors; ``inl_pct`` is its best-fit INL in % of the fitted span (IEEE 1241); see
    :func:`transfer_curve` for ``dynamic_range_mV``.
    """

    gain: float
    gain_err: float
    offset_mV: float
    offset_err: float
    inl_pct: float
    dynamic_range_mV: float
    fit: LineFit


def transfer_curve(
    amplitudes_mV: ArrayLike,
    heights_mV: ArrayLike,
    sigma: ArrayLike | None = None,
    deviation_pct: float = DEFAULT_DEVIATION_PCT,
) -> TransferFit:
    """Gain, offset, INL and dynamic range of an amplitude scan.

    Gain, offset and INL come from one least-squares line over all points (``sigma``: one-sigma
    errors of the heights, see :func:`~sequencer.analysis.lines.fit_line`).

    Dynamic range, exactly: sort the points by amplitude A (lowest A_0).  Each point k is compared
    with the line fitted to the lower, linear part below it, the points with A - A_0 <= (A_k -
    A_0)/2; its deviation is ``100 · |h_k - line(A_k)| / |line(A_k) - line(A_0)|``, i.e. in % of that
    line's output swing (for A_0 = 0 the expected signal: the usual "x % compression").  Points
    whose lower half holds fewer than 3 points (too few for a line with an error) are accepted
    unchecked.  The first point whose deviation exceeds ``deviation_pct`` ends the linear part;
    ``dynamic_range_mV`` is the largest amplitude before it, or the largest amplitude of the scan
    when no point deviates (a lower bound then).  The half keeps the reference line clear of the
    compression it is to detect: for a cubic onset (tanh saturation) the line over the lower half
    sees 80 % of the true compression at A_k, so a 1 % limit ends the range between the true 1 %
    and 1.25 % compression points.  Heights should be averaged so that their noise stays well
    below ``deviation_pct`` of the swing at the low end of the scan.
    """
    amps = as_points(amplitudes_mV, "amplitudes_mV", min_len=MIN_LINE_POINTS)
    heights = as_points(heights_mV, "heights_mV", min_len=MIN_LINE_POINTS)
    same_length(amps, heights, "amplitudes_mV", "heights_mV")
    limit = positive(deviation_pct, "deviation_pct")
    fit = fit_line(amps, heights, sigma)
    order = np.argsort(amps, kind="stable")
    sig = None if sigma is None else np.broadcast_to(np.asarray(sigma, float), amps.shape)[order]
    return TransferFit(
        gain=fit.slope,
        gain_err=fit.slope_err,
        offset_mV=fit.intercept,
        offset_err=fit.intercept_err,
        inl_pct=percent_of_span(fit.residuals, fit.slope, amps),
        dynamic_range_mV=_dynamic_range(amps[order], heights[order], sig, limit),
        fit=fit,
    )


def _dynamic_range(
    amps: np.ndarray, heights: np.ndarray, sigma: np.ndarray | None, limit_pct: float
) -> float:
    """Largest amplitude of the linear part (inputs sorted by amplitude); see transfer_curve."""
    last = 0
    for k in range(1, amps.size):
        span = amps[k] - amps[0]
        lower = int(np.searchsorted(amps, amps[0] + 0.5 * span, side="right"))
        if lower >= MIN_LINE_POINTS and amps[lower - 1] > amps[0]:
            line = fit_line(amps[:lower], heights[:lower], None if sigma is None else sigma[:lower])
            miss = abs(heights[k] - (line.slope * amps[k] + line.intercept))
            if miss > limit_pct / 100.0 * abs(line.slope * span):
                break
        last = k
    return float(amps[last])

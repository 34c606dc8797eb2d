"""The onset (start) of a shaped pulse, fitted: the instant its peaking time counts from.

A trigger is not the pulse's start: cables and the preamp delay the pulse by tens of ns.  The onset
is found by least squares (scipy.optimize.curve_fit) of the shaping-amplifier response to a step,
x = (t - t0)/τ (Spieler 2005 ch. 4, REFERENCES.md):

* unipolar CR-RCⁿ   v = A · (x/n)ⁿ e^(n-x)                       (unit peak at x = n)
* bipolar CR²-RCⁿ   v = A · (x/n)ⁿ e^(n-x) (1 - x/(n+1)) / c      (c: its positive peak)

with A, t0, τ and n free (n continuous, so a shaper of any order, or one only close to CR-RCⁿ, is
fitted without being told its order); the peak instant is the fitted model's.  A pulse whose signed excursion after its peak goes below
``BIPOLAR_LOBE`` of its height is fitted as bipolar (the negative lobe of CR²-RCⁿ is 0.34-0.54 of
the positive one for n = 1..4, REFERENCES.md).  The fit covers the record up to twice the
onset-to-peak time past the peak, from starts of order 1..6, and keeps the best χ².
"""

from __future__ import annotations

import math
import warnings

import numpy as np
from scipy.optimize import OptimizeWarning, curve_fit

BIPOLAR_LOBE = 0.15
"""An opposite lobe deeper than this fraction of the height marks a bipolar pulse."""
START_ORDERS = (1.0, 2.0, 4.0, 6.0)
ORDER_BOUNDS = (0.3, 15.0)

ONSET_NOT_FITTED = "the pulse onset could not be fitted"


def _unipolar(t: np.ndarray, a: float, t0: float, tau: float, n: float) -> np.ndarray:
    x = np.clip((t - t0) / tau, 0.0, None)
    with np.errstate(divide="ignore", invalid="ignore"):
        v = np.where(x > 0, np.exp(n * np.log(np.where(x > 0, x, 1.0) / n) + n - x), 0.0)
    return a * v


def _bipolar_peak(n: float) -> tuple[float, float]:
    xp = n + 1.0 - math.sqrt(n + 1.0)
    return xp, (xp / n) ** n * math.exp(n - xp) * (1.0 - xp / (n + 1.0))


def _bipolar(t: np.ndarray, a: float, t0: float, tau: float, n: float) -> np.ndarray:
    x = np.clip((t - t0) / tau, 0.0, None)
    return _unipolar(t, 1.0, t0, tau, n) * (1.0 - x / (n + 1.0)) * (a / _bipolar_peak(n)[1])


def is_bipolar(signed: np.ndarray, ipk: int, top: float) -> bool:
    """True when the (positive-going) row has an opposite lobe after its peak."""
    return bool(np.min(signed[ipk:]) < -BIPOLAR_LOBE * top)


def fit_onset(signed: np.ndarray, dt_ns: float, ipk: int) -> tuple[float, float]:
    """Fitted onset and peak instant (ns, sample i at i·dt) of one baseline-subtracted
    positive-going row; NaN, NaN if no fit converges.  The peak is the fitted model's (x = n, or
    n + 1 - √(n+1) for a bipolar pulse): the whole pulse locates it, not the few noisy samples at
    its top."""
    top = float(signed[ipk])
    t = np.arange(signed.size) * dt_ns
    t_peak = ipk * dt_ns
    below = np.flatnonzero(signed[:ipk] < 0.1 * top)
    t10 = (below[-1] if below.size else 0) * dt_ns
    bipolar = is_bipolar(signed, ipk, top)
    model = _bipolar if bipolar else _unipolar
    best, best_chi2 = (float("nan"), float("nan")), math.inf
    for n in START_ORDERS:
        x10 = _tenth_of_peak(n)
        x_peak = _bipolar_peak(n)[0] if bipolar else n
        tau = max((t_peak - t10) / max(x_peak - x10, 1e-3), dt_ns)
        t0 = t10 - x10 * tau
        end = min(signed.size, ipk + int(2 * (t_peak - t0) / dt_ns) + 2)
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", OptimizeWarning)
                p, _ = curve_fit(
                    model,
                    t[:end],
                    signed[:end],
                    p0=(top, t0, tau, n),
                    bounds=(
                        (0.0, -math.inf, 1e-3 * dt_ns, ORDER_BOUNDS[0]),
                        (math.inf, t_peak, math.inf, ORDER_BOUNDS[1]),
                    ),
                    maxfev=4000,
                )
        except (RuntimeError, ValueError):
            continue
        chi2 = float(np.sum((signed[:end] - model(t[:end], *p)) ** 2))
        if chi2 < best_chi2:
            x_peak = _bipolar_peak(p[3])[0] if bipolar else p[3]
            best, best_chi2 = (float(p[1]), float(p[1] + x_peak * p[2])), chi2
    return best


def _tenth_of_peak(n: float) -> float:
    """x where (x/n)ⁿ e^(n-x) = 0.1 on the rising side (bisection: monotonic below x = n)."""
    lo, hi = 1e-9, n
    for _ in range(60):
        mid = 0.5 * (lo + hi)
        if (mid / n) ** n * math.exp(n - mid) < 0.1:
            lo = mid
        else:
            hi = mid
    return 0.5 * (lo + hi)

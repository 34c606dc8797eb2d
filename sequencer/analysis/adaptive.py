"""Where to count next on an S-curve: a threshold scan that adapts to what it has seen.

A fixed grid spends most of its gates where the efficiency is already known to be 0 or 1.  This
planner (pure: it never touches an instrument) proposes one threshold at a time, and the caller
reports the count it got:

1. **coarse**: ``coarse`` thresholds evenly across ``centre ± window``;
2. **bracket**: the 50 % point lies between the last threshold that fired on at least half the
   pulses and the first that fired on fewer; while fewer than two distinct thresholds sit inside the
   transition (0 < fired < trials), bisect that bracket (a transition outside the window moves the
   scan out by half a window, at most ``MAX_SHIFTS`` times);
3. **design**: fit ε(x) = norm.sf(x, μ, σ) (:func:`fit_s_curve`, binomial maximum likelihood) and
   count where a gate constrains μ and σ most: both uncertain, alternately at μ ± 1.1381 σ (the
   D-optimal two-point design of the probit model, maximising det of the Fisher information);
   only μ, at μ; only σ, alternately at μ ± 1.5750 σ (the most information on σ per pulse).
   It stops when the fit's standard uncertainties reach the targets, or after ``max_gates``.

Thresholds are in the falling convention of :func:`fit_s_curve` (efficiency falls as the threshold
rises); a caller on a negative-going output mirrors them.  The D-optimal point is quoted from
memory (optimal-design literature for binary dose-response models), the σ point was found
numerically; the tests check both against scipy.optimize.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .scurves import SCurveFit, fit_s_curve

#: z of the D-optimal two-point probit design: maximises det I(μ, σ) over ±z (from memory; tested).
D_OPTIMAL_Z = 1.1381
#: z where one pulse tells most about σ: maximises z² φ(z)² / (Φ(z)(1 − Φ(z))) (numerical; tested).
SIGMA_OPTIMAL_Z = 1.5750
#: How often a transition found outside the window moves the scan (half a window each time).
MAX_SHIFTS = 4
#: A bracket narrower than this fraction of the window is not split further.
MIN_BRACKET = 1e-4


@dataclass(frozen=True, kw_only=True)
class ScanTargets:
    """When to stop: the standard uncertainties to reach (mV) and a budget of gates."""

    mu_mV: float
    sigma_mV: float
    max_gates: int = 60
    coarse: int = 5

    def __post_init__(self) -> None:
        if not (self.mu_mV > 0 and self.sigma_mV > 0):
            raise ValueError("target uncertainties must be above 0 mV")
        if self.coarse < 3 or self.max_gates < self.coarse:
            raise ValueError(
                "need at least 3 coarse thresholds and a budget of at least as many gates"
            )


class AdaptiveSCurve:
    """Proposes thresholds (:meth:`next_threshold`) and takes counts (:meth:`add`)."""

    def __init__(self, *, centre_mV: float, window_mV: float, trials: int, targets: ScanTargets):
        if not (np.isfinite(centre_mV) and window_mV > 0 and trials >= 1):
            raise ValueError("need a finite centre, a window above 0 mV and at least 1 trial")
        self.window = float(window_mV)
        self.trials = int(trials)
        self.targets = targets
        self.x: list[float] = []
        self.fired: list[int] = []
        self.fit: SCurveFit | None = None
        self.stopped = ""  # why the scan ended ("" while it goes on)
        self._queue = list(
            np.linspace(centre_mV - window_mV, centre_mV + window_mV, targets.coarse)
        )
        self._shifts = 0
        self._side = 1

    @property
    def gates(self) -> int:
        return len(self.x)

    @property
    def reached(self) -> bool:
        f = self.fit
        return (
            f is not None
            and f.mu_err <= self.targets.mu_mV
            and f.sigma_err <= self.targets.sigma_mV
        )

    def add(self, x_mV: float, fired: int) -> None:
        """The count of one gate at threshold ``x_mV``.  A count above the pulses sent (the
        discriminator fires on noise) is kept as it is and ends the scan: the fit refuses it."""
        if fired < 0:
            raise ValueError(f"fired={fired} is negative")
        self.x.append(float(x_mV))
        self.fired.append(int(fired))
        if fired > self.trials:
            self.stopped = (
                f"{fired} counts for {self.trials} pulses at {x_mV:.4g} mV: the discriminator "
                "fires on noise"
            )

    def next_threshold(self) -> float | None:
        """The threshold of the next gate, or None when the scan is done (see :attr:`stopped`)."""
        if self.stopped:
            return None
        if self._queue:
            return float(self._queue.pop(0))
        if self.gates >= self.targets.max_gates:
            self._refit()
            self.stopped = self.stopped or "gate budget spent"
            return None
        inside = {x for x, k in zip(self.x, self.fired, strict=True) if 0 < k < self.trials}
        if len(inside) < 2:
            return self._bracket()
        self._refit()
        if self.fit is None:
            return self._bracket()
        if self.reached:
            self.stopped = "target uncertainty reached"
            return None
        return self._design(self.fit)

    def _refit(self) -> None:
        try:
            self.fit = fit_s_curve(self.x, self.fired, self.trials)
        except ValueError:
            self.fit = None

    def _bracket(self) -> float | None:
        xs = np.array(self.x)
        frac = np.array(self.fired) / self.trials
        high = xs[frac >= 0.5]  # fired on at least half: below the 50 % point
        low = xs[frac < 0.5]
        if high.size == 0 or low.size == 0:
            if self._shifts >= MAX_SHIFTS:
                self.stopped = "no transition found within the scanned range"
                return None
            self._shifts += 1
            step = self.window / 2
            return float(xs.min() - step) if high.size == 0 else float(xs.max() + step)
        lo, hi = (
            float(high.max()),
            float(low[low > high.max()].min()) if np.any(low > high.max()) else None,
        )
        if hi is None or hi - lo < MIN_BRACKET * self.window:
            self.stopped = "transition narrower than the threshold steps can resolve"
            return None
        return (lo + hi) / 2

    def _design(self, fit: SCurveFit) -> float:
        mu_short = fit.mu_err > self.targets.mu_mV
        sigma_short = fit.sigma_err > self.targets.sigma_mV
        if mu_short and not sigma_short:
            return float(fit.mu)
        z = D_OPTIMAL_Z if mu_short else SIGMA_OPTIMAL_Z
        self._side = -self._side
        return float(fit.mu + self._side * z * fit.sigma)

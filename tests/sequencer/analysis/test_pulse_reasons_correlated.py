"""A dead channel reads "no pulse" whatever the noise's random draw (sequencer/analysis/refusals.py).

References outside the project: the noise is white Gaussian noise (numpy) filtered by a CR-RC^n
shaper (scipy.signal.lfilter; one CR differentiator and n RC integrators of equal time constant,
exact discrete one-pole sections), the textbook semi-Gaussian shaper of detector front ends; the
false-alarm count of 500 independent seeds is judged by the binomial distribution (scipy.stats).
Bartlett's effective sample count is checked against the true autocorrelation of the same filter
(its impulse response, scipy.signal.lfilter), and the σ bound against the chi-square quantile.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import signal, stats

from sequencer.analysis.refusals import (
    NON_FINITE,
    WRONG_POLARITY,
    effective_samples,
    no_pulse,
    noise_bound_factor,
    pulse_reasons,
)

SEEDS = 500
N_BASE = 75  # the shipped peaking fragment: 300 ns at 250 MS/s
POINTS = 600
CLAIMED_FALSE_ALARM = 0.02  # SIGMA_BOUND_ALPHA's docstring: <= 2 % down to 6 time constants


def shaper(order: int, tau: float) -> tuple[np.ndarray, np.ndarray]:
    """CR-RC^order with time constant ``tau`` samples, unit DC-free gain (exact one-pole sections)."""
    a = np.exp(-1.0 / tau)
    b, den = np.array([1.0, -1.0]), np.array([1.0, -a])
    for _ in range(order):
        b, den = np.convolve(b, [1.0 - a]), np.convolve(den, [1.0, -a])
    return b, den


def shaped_noise(order: int, tau: float, rows: int, seed: int) -> np.ndarray:
    """Stationary shaped noise, unit σ: the filter's start-up (40 τ) is dropped."""
    rng = np.random.default_rng(seed)
    if order == 0:
        return rng.standard_normal((rows, POINTS))
    b, a = shaper(order, tau)
    warm = int(40 * tau)
    x = signal.lfilter(b, a, rng.standard_normal((rows, POINTS + warm)), axis=1)[:, warm:]
    return x / x.std()


def true_effective_samples(order: int, tau: float, n: int) -> float:
    """Bartlett's ν from the filter's exact autocorrelation (its impulse response's)."""
    b, a = shaper(order, tau)
    h = signal.lfilter(b, a, np.r_[1.0, np.zeros(int(60 * tau))])
    acf = np.correlate(h, h, "full")[h.size - 1 :]
    rho = acf[1:n] / acf[0]
    k = np.arange(1, n)
    return n / (1.0 + 2.0 * np.sum((1.0 - k / n) * rho**2))


# white noise, a fast output (τ = 3 samples) and the shaped output (τ = 50 ns = 12.5 samples)
CASES = [(0, 1.0), (1, 3.0), (4, 3.0), (1, 12.5), (2, 12.5), (4, 12.5)]


@pytest.mark.parametrize(("order", "tau"), CASES)
def test_noise_alone_reads_no_pulse_below_the_claimed_false_alarm_rate(order, tau):
    """Each seed alone (a call of one capture, as the mean trace of a step is judged), then all
    seeds in one call (the autocorrelation averaged over 64 of them)."""
    rows = shaped_noise(order, tau, SEEDS, seed=1000 * order + int(10 * tau))
    for sign, together in ((1, False), (-1, False), (1, True)):
        if together:
            reasons = pulse_reasons(rows, N_BASE, polarity=sign)
        else:
            reasons = [pulse_reasons(row[None, :], N_BASE, polarity=sign)[0] for row in rows]
        false = sum(r != no_pulse() for r in reasons)
        # binomial margin: at the claimed rate, 500 seeds exceed this count with probability 1e-3
        allowed = stats.binom.ppf(0.999, SEEDS, CLAIMED_FALSE_ALARM)
        assert false <= allowed, (order, tau, sign, false, allowed)


def test_the_old_rule_failed_on_shaped_noise():
    """The RMS of 75 samples of CR-RC^4 noise (τ = 12.5 samples) alone took noise for a pulse or a
    wrong polarity in about a third of the seeds: the case the bound exists for."""
    rows = shaped_noise(4, 12.5, SEEDS, seed=7)
    w = rows[:, :N_BASE]
    dev = np.maximum(rows.max(axis=1) - w.mean(axis=1), w.mean(axis=1) - rows.min(axis=1))
    old_false = np.mean(dev > 5.0 * w.std(axis=1))
    assert old_false > 0.1
    new_false = np.mean([r != no_pulse() for r in (pulse_reasons(x[None, :], N_BASE)[0] for x in rows)])
    assert new_false < old_false / 10


@pytest.mark.parametrize(("order", "tau"), [(0, 1.0), (4, 3.0), (4, 12.5)])
@pytest.mark.parametrize("sign", [1, -1])
def test_real_pulses_are_found_with_their_polarity(order, tau, sign):
    """A CR-RC^4 pulse (peak at 4 τ_p, τ_p = 12.5 samples) of a height a few times the rule's own
    threshold (min_snr × the bound factor of the true ν) is found, and read as the wrong polarity
    when analysed the other way round."""
    noise = shaped_noise(order, tau, 200, seed=99 + order)
    nu = true_effective_samples(order, tau, N_BASE) if order else float(N_BASE)
    threshold = 5.0 * noise_bound_factor(nu)
    t = np.clip(np.arange(POINTS) - 100.0, 0.0, None) / 12.5  # onset at sample 100
    pulse = (t / 4.0) ** 4 * np.exp(4.0 - t)  # CR-RC^4 response to a step, unit peak at 4 τ_p
    rows = noise + sign * 3.0 * threshold * pulse
    assert all(r == "" for r in pulse_reasons(rows, N_BASE, polarity=sign, flat_top=False))
    other = pulse_reasons(rows, N_BASE, polarity=-sign, flat_top=False)
    assert all(r == WRONG_POLARITY for r in other)


@pytest.mark.parametrize(("order", "tau"), [(1, 3.0), (4, 3.0), (2, 12.5)])
def test_effective_samples_follow_bartlett_on_the_true_autocorrelation(order, tau):
    """The window estimate of ν, one window alone (median over seeds) and 64 together, is within a
    factor 2 of Bartlett's ν from the filter's exact autocorrelation (a short window's estimate is
    biased up: the factor covers it)."""
    rows = shaped_noise(order, tau, SEEDS, seed=5)
    alone = float(np.median([effective_samples(w[None, :N_BASE]) for w in rows]))
    together = effective_samples(rows[:, :N_BASE])
    truth = true_effective_samples(order, tau, N_BASE)
    for est in (alone, together):
        assert truth / 2.0 <= est <= 2.0 * truth, (est, truth)
    assert truth < 0.7 * N_BASE  # correlated: fewer than the 75 samples


def test_white_noise_keeps_about_all_its_samples_and_the_chi_square_bound():
    rows = shaped_noise(0, 1.0, SEEDS, seed=11)
    assert effective_samples(rows[:, :200]) == pytest.approx(200, rel=0.1)
    assert np.median([effective_samples(w[None, :200]) for w in rows]) == pytest.approx(200, rel=0.1)
    # the bound is the chi-square one: sqrt(ν / χ²_ν(1e-3)) (standard normal-variance interval)
    assert noise_bound_factor(200.0) == pytest.approx(
        np.sqrt(200.0 / stats.chi2.ppf(1e-3, 200.0))
    )


def test_a_non_finite_row_spoils_only_itself():
    """The autocorrelation is shared by the rows of a call: a row with NaN is refused for its NaN
    and the others are judged as without it."""
    rows = shaped_noise(0, 1.0, 4, seed=3)
    rows[1:] += 50.0 * np.exp(-0.5 * ((np.arange(POINTS) - 300.0) / 10.0) ** 2)
    rows[2, 10] = np.nan
    assert pulse_reasons(rows, N_BASE) == [no_pulse(), "", NON_FINITE, ""]

"""The discriminator's logic output ``disc``: when it fires, from the noisy fast pulse it sees.

For each capture the discriminator of channel c sees the fast x1 pulse of the injected amplitude
above its (AC-coupled) baseline, signed so that it rises, plus the x1 output's own noise: RMS
``noise_in_mV · gain_x1``, band-limited by one pole at the preamp's rise time constant (the noise
model of the scope's x1 traces), drawn on a 10 ps grid.  Nothing here draws a jitter from a formula:
the time spread comes from that noise alone, so σ_noise/(dV/dt) can be checked against it.

* ``leading_edge``: the first crossing of the effective threshold u = level − ``discriminator_offset_mV``
  (signed like the x1 output; the threshold DAC's level for the channel), linearly interpolated;
* ``constant_fraction``: the signal y(t − d) − f·y(t) (delay ``delay_ns``, fraction ``fraction``)
  crosses zero upward on the leading edge, whatever the amplitude; the unit is armed by the same
  threshold and fires at the crossing after arming (at the arming instant when the crossing came
  before it, as for pulses just above the threshold).

The output is a positive logic pulse of ``logic_mV`` starting ``propagation_ns`` after that instant,
linear edges of ``edge_ns``, ``width_ns`` long; no crossing, no pulse.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.signal import lfilter

from drivers.sim.board import BoardSpec
from drivers.sim.physics import fast_pulse
from drivers.sim.response import discriminator_height_mV, noise_rms_mV, noise_tau_ns

#: The grid (ns) on which the discriminator's input is drawn.
FINE_NS = 0.01


def _input_mV(
    board: BoardSpec, channel: int, amplitude_mV: float, rng: np.random.Generator
) -> tuple[np.ndarray, np.ndarray]:
    """(times after the trigger in ns, the rising discriminator input in mV) around the pulse."""
    pulse = board.pulse
    span = 4.0 * pulse.tau_decay_ns + 10.0 * pulse.tau_rise_ns
    t = board.pulse_delay_ns - 5.0 + FINE_NS * np.arange(int((span + 5.0) / FINE_NS))
    height = abs(discriminator_height_mV(board, channel, amplitude_mV))
    signal = height * fast_pulse(t - board.pulse_delay_ns, pulse.tau_rise_ns, pulse.tau_decay_ns)
    sigma = noise_rms_mV(board, channel, "x1")
    if sigma > 0:
        a = math.exp(-FINE_NS / noise_tau_ns(board, "x1"))  # one pole: stationary RMS sigma
        white = rng.standard_normal(t.size) * sigma * math.sqrt(1.0 - a * a)
        start = rng.standard_normal() * sigma
        signal = signal + lfilter([1.0], [1.0, -a], white, zi=[a * start])[0]
    return t, signal


def _crossing(t: np.ndarray, y: np.ndarray, level: float, start: int = 0) -> float | None:
    """First upward crossing of ``level`` at or after index ``start``, interpolated."""
    above = np.flatnonzero(y[start:] >= level)
    if above.size == 0:
        return None
    k = start + int(above[0])
    if k == 0:
        return float(t[0])
    y0, y1 = y[k - 1], y[k]
    return float(t[k - 1] + (level - y0) / (y1 - y0) * (t[k] - t[k - 1]))


def fire_time_ns(
    board: BoardSpec, channel: int, amplitude_mV: float, level_mV: float, rng: np.random.Generator
) -> float | None:
    """When the discriminator of ``channel`` fires (ns after the trigger), or None."""
    spec, chan = board.discriminator, board.channels[channel - 1]
    u = board.sign("x1") * (level_mV - chan.discriminator_offset_mV)
    if u <= 0 or chan.dead:
        return None
    t, y = _input_mV(board, channel, amplitude_mV, rng)
    armed = _crossing(t, y, u)
    if armed is None or spec.mode == "leading_edge":
        return armed
    shift = round(spec.delay_ns / FINE_NS)
    delayed = np.concatenate([np.full(shift, y[0]), y[:-shift]])
    cfd = delayed - spec.fraction * y
    k_arm = int(np.searchsorted(t, armed))
    if k_arm >= t.size or cfd[k_arm] >= 0:
        return armed  # the fraction was crossed before the threshold
    return _crossing(t, cfd, 0.0, k_arm) or armed


def logic_mV(
    board: BoardSpec,
    fired_ns: float | None,
    t_ns: np.ndarray,
    *,
    delay_ns: float | None = None,
    width_ns: float | None = None,
) -> np.ndarray:
    """The noise-free logic output at times ``t_ns`` for a discriminator that fired at ``fired_ns``
    (``delay_ns``, ``width_ns``: another unit's, e.g. the coincidence output; default the
    discriminator's).  Linear edges of ``edge_ns``: the 50 % points are exactly ``width`` apart."""
    spec = board.discriminator
    if fired_ns is None:
        return np.zeros_like(t_ns, dtype=float)
    delay = spec.propagation_ns if delay_ns is None else delay_ns
    width = spec.width_ns if width_ns is None else width_ns
    x = t_ns - (fired_ns + delay)
    rise = np.clip(x / spec.edge_ns, 0.0, 1.0)
    fall = np.clip((width + spec.edge_ns - x) / spec.edge_ns, 0.0, 1.0)
    return spec.logic_mV * np.minimum(rise, fall)

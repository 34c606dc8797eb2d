"""The board's response to an injected test pulse, per channel and output (DESIGN.md physics).

The fast output ``k`` (x1, x5) of channel ``c`` for an injected amplitude A (mV at the injection
input) is ``baseline + sign · S · tanh(gain_k · A / S) · p(t)`` with S = ``saturation_mV`` and p the
unit fast pulse (:func:`drivers.sim.physics.fast_pulse`); ``sign`` is :meth:`BoardSpec.sign` of the
output (-1 for ``polarity: negative``, flipped again by ``inverter: true``, or as
``output_polarity`` names it); ``baseline`` is the output's DC level (``ChannelSpec.baseline``:
``output_baseline_mV`` of that output, else ``baseline_mV``).  The shaped output is ``baseline + sign · S · tanh(gain_x1 ·
shaper.gain · A / S) · h(t)`` with h the unit-peak CR-RCⁿ or CR²-RCⁿ response (positive-going
unless ``output_polarity`` makes it negative).
Channels c ± 1 see ``crosstalk_pct / 100`` times the aggressor's pulse on the same output.  A dead
channel shows its baseline and noise only (no pulse, no crosstalk in or out).  Pulses start at
``t = pulse_delay_ns`` after the trigger.

Noise: RMS ``noise_in_mV · gain_k`` per sample (shaped: ``noise_in_mV · gain_x1 · shaper.gain``),
band-limited by the preamp (time constant τr of the fast pulse) or by the shaper (τ); x1 and x5 of one
channel share the same preamp noise (scaled by their gains), the shaped output has its own.
"""

from __future__ import annotations

import numpy as np

from drivers.sim.board import BoardSpec
from drivers.sim.physics import compressed_height, fast_pulse, shaped_pulse


def coupling(board: BoardSpec, channel: int, injected: int | None) -> float:
    """How much of the injected channel's pulse ``channel`` shows: 1, crosstalk_pct/100 or 0."""
    if injected is None or board.channels[channel - 1].dead or board.channels[injected - 1].dead:
        return 0.0
    if injected == channel:
        return 1.0
    if abs(injected - channel) == 1:
        return board.crosstalk_pct / 100.0
    return 0.0


def pulse_height_mV(board: BoardSpec, channel: int, output: str, amplitude_mV: float) -> float:
    """Height S·tanh(g·A/S) of ``output`` of ``channel`` (before polarity and crosstalk factor)."""
    spec = board.channels[channel - 1]
    return compressed_height(amplitude_mV, board.gain(channel, output), spec.saturation_mV)


def output_signal_mV(
    board: BoardSpec,
    channel: int,
    output: str,
    *,
    injected: int | None,
    amplitude_mV: float,
    t_ns: np.ndarray,
) -> np.ndarray:
    """Noise-free output (mV) of ``output`` of ``channel`` at trigger-relative times ``t_ns``."""
    t = np.asarray(t_ns, dtype=float)
    signal = np.full(t.shape, board.channels[channel - 1].baseline(output))
    k = coupling(board, channel, injected)
    if k == 0.0 or injected is None:
        return signal
    height = k * pulse_height_mV(board, injected, output, amplitude_mV)
    tt = t - board.pulse_delay_ns
    if output == "shaped":
        shaper = board.shaper
        shape = shaped_pulse(tt, shaper.order, shaper.tau_ns, shaper.kind)
        return signal + board.sign(output) * height * shape
    pulse = board.pulse
    return signal + board.sign(output) * height * fast_pulse(
        tt, pulse.tau_rise_ns, pulse.tau_decay_ns
    )


def noise_rms_mV(board: BoardSpec, channel: int, output: str) -> float:
    """Per-sample RMS noise of ``output`` of ``channel``: noise_in_mV × gain."""
    return board.channels[channel - 1].noise_in_mV * board.gain(channel, output)


def noise_tau_ns(board: BoardSpec, output: str) -> float:
    """Time constant of the one-pole band limit of the noise on ``output``."""
    return board.shaper.tau_ns if output == "shaped" else board.pulse.tau_rise_ns


def discriminator_height_mV(board: BoardSpec, channel: int, amplitude_mV: float) -> float:
    """Fast x1 pulse height from the baseline seen by the (AC-coupled) discriminator, signed like
    the x1 output (negative for a negative-going one); 0 if dead."""
    if board.channels[channel - 1].dead:
        return 0.0
    return board.sign("x1") * abs(pulse_height_mV(board, channel, "x1", amplitude_mV))

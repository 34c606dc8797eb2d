"""Simulated counter: counts the board's discriminator firings over a gate.

Per gate of G seconds on the selected board channel c (``ROUTe:TERMinals:CHANnel``):

* **pulser-driven firings**: when the pulser output is on and c is the injected channel, each of the
  N trials (burst count in burst mode, else frequency × G) fires with probability
  ``ε = ½ erfc((thr - offset - h) / (√2 σ))`` where h is the fast x1 pulse height S·tanh(gain_x1·A/S)
  (0 for a dead channel), thr the threshold DAC level of c, offset its ``discriminator_offset_mV`` and
  σ = noise_in_mV · gain_x1; the count is drawn from Binomial(N, ε).  On a negative-going x1
  output (``BoardSpec.sign("x1")`` = -1) h is negative and the discriminator fires when the pulse
  goes *below* thr - offset: ε = ½ erfc((h - (thr - offset)) / (√2 σ)); the 50 % threshold is
  h + offset for either polarity;
* **noise firings** when no pulse is injected into c: Poisson with the Rice rate
  ``ν₀ exp(-u²/2σ²)``, u = ±(thr - offset) in the output's direction, ν₀ = √3/(2π·discriminator_tau_ns) (CR-RC², REFERENCES.md);
* **dark pulses** (board key ``dark_rate_hz``, default 0): Poisson at that rate, each of height
  ``dark_height_mV`` firing with the same erfc probability.

``INITiate`` starts the gate and draws the count (rng ``[seed, instrument_id, gate_counter]``);
``FETCh:TOTalize?`` waits until the gate is over.  The gate lasts ``G · time_scale`` real seconds
(board key ``time_scale``, default 0: instant).  Defaults: gate 0.1 s (1 µs - 1000 s), channel 1.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from drivers.sim.board import BoardSpec
from drivers.sim.instrument import Call, Command, SimInstrument, command
from drivers.sim.physics import firing_probability, rice_rate_hz
from drivers.sim.pulser import Pulser
from drivers.sim.response import discriminator_height_mV
from drivers.sim.scpi_parser import STANDARD_ERRORS, format_float, parse_int, parse_number
from drivers.sim.switch import Switch
from drivers.sim.threshold import ThresholdDac

MAX_WAIT_S = 3600.0


class GatedCounter(SimInstrument):
    """What every simulated counter shares: the gate, the selected channel, ``INITiate`` and the
    ``FETCh:TOTalize?`` that waits for the gate.  A subclass says how many channels it has and
    draws a gate's count in :meth:`start_gate` (setting ``count`` and ``gate_end``)."""

    role = "counter"
    model = "LTS-CT2"

    def __init__(self, **kwargs: object) -> None:
        self.gates = 0
        self.gate_s = 0.1
        self.channel = 1
        self.count: int | None = None
        self.gate_end = 0.0
        super().__init__(**kwargs)  # type: ignore[arg-type]

    def reset(self) -> None:
        self.gate_s = 0.1
        self.channel = 1
        self.count = None

    def channel_count(self) -> int:
        """How many inputs ``ROUTe:TERMinals:CHANnel`` may select."""
        raise NotImplementedError

    def start_gate(self) -> None:
        """Open a gate now and draw its count."""
        raise NotImplementedError

    def commands(self) -> Sequence[Command]:
        return [
            command(
                "[SENSe:]GATE:TIME", write=self._set_gate, query=lambda c: format_float(self.gate_s)
            ),
            command(
                "ROUTe:TERMinals:CHANnel",
                write=self._set_channel,
                query=lambda c: str(self.channel),
            ),
            command("INITiate[:IMMediate]", write=lambda c: self.start_gate(), max_params=0),
            command("FETCh[:TOTalize]", query=self._fetch),
        ]

    def _set_gate(self, call: Call) -> None:
        self.gate_s = parse_number(call.arg(), lo=1e-6, hi=1000.0)

    def _set_channel(self, call: Call) -> None:
        self.channel = parse_int(call.arg(), lo=1, hi=self.channel_count())

    def _fetch(self, call: Call) -> str:
        if self.count is None:
            self.push_error(-230, STANDARD_ERRORS[-230])
            return "0"
        wait = self.gate_end - self.clock()
        if wait > 0:
            self.sleep(min(wait, MAX_WAIT_S))
        return str(self.count)


class Counter(GatedCounter):
    """The counter role of a preamp bench."""

    def __init__(
        self,
        *,
        board: BoardSpec,
        pulser: Pulser,
        switch: Switch,
        threshold: ThresholdDac,
        **kwargs: object,
    ) -> None:
        self.board = board
        self.pulser = pulser
        self.switch = switch
        self.threshold = threshold
        super().__init__(**kwargs)

    def channel_count(self) -> int:
        return len(self.board.channels)

    def expected_rates(self) -> tuple[int, float, float]:
        """(pulser trials, firing probability per trial, Poisson rate in Hz) for the present settings."""
        board = self.board
        c = self.channel
        spec = board.channels[c - 1]
        sigma = spec.noise_in_mV * spec.gain_x1
        # everything in the direction the x1 output swings: a negative-going output fires when
        # the pulse goes below a negative threshold
        sign = board.sign("x1")
        u = sign * (self.threshold.level_mV(c) - spec.discriminator_offset_mV)
        injected = self.pulser.settings.output_on and self.switch.injected == c
        trials = self.pulser.trials(self.gate_s) if injected else 0
        p = firing_probability(
            sign * discriminator_height_mV(board, c, self.pulser.amplitude_mV), u, sigma
        )
        rate = 0.0 if injected else rice_rate_hz(u, sigma, board.discriminator_tau_ns)
        if board.dark_rate_hz > 0 and not spec.dead:
            rate += board.dark_rate_hz * firing_probability(board.dark_height_mV, u, sigma)
        return trials, p, rate

    def start_gate(self) -> None:
        """Open a gate now and draw its count."""
        self.gates += 1
        rng = np.random.default_rng([self.board.seed, self.instrument_id, self.gates])
        trials, p, rate = self.expected_rates()
        pulses = int(rng.binomial(trials, p)) if trials else 0
        self.count = pulses + int(rng.poisson(rate * self.gate_s))
        real = self.pace.spend("gate", self.gate_s)  # the gate itself, when the bench runs in real time
        self.gate_end = self.clock() + max(real, self.gate_s * self.board.time_scale)

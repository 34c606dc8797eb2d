"""Simulated two-input coincidence unit: pulse trains, input delays, a window, counting over a gate.

Each gate of G seconds (``INITiate``) draws the pulses arriving at the two inputs on a *simulated*
clock (time 0 .. G, nothing depends on real time) from a :data:`TrainSource`, then applies the unit:

* an input fires on a pulse of height h with probability ``½·erfc((thr - h)/(√2·noise_mV))`` and the
  input's ``efficiency`` (thresholds ``INPut<n>:THReshold``, default 0 V);
* its time becomes ``t + delay_n + N(0, jitter_ns)`` (``INPut<n>:DELay``, 0 .. 1 µs, default 0;
  input 2 also carries the fixed cable ``skew_ns`` of the board);
* a coincidence is counted for each fired pulse of input 1 that has a fired pulse of input 2 within
  ``|t₂ - t₁| < τ``, τ = window + ``resolving_extra_ns`` (``SENSe:COINcidence:WINDow``, 1 ns .. 1 µs,
  default 20 ns).  For independent Poisson trains this gives R_acc = 2τR₁R₂ (to first order in τR₂).

``FETCh:COINcidence?`` returns ``coincidences,singles1,singles2`` once the gate is over (the gate
lasts ``G · time_scale`` real seconds, board key ``time_scale``, default 0: instant).  The draw uses
rng ``[seed, instrument_id, gate_counter]``: the same board and commands give the same counts.

The default source (board section ``coincidence``, :class:`drivers.sim.board.CoincidenceSpec`):
independent Poisson singles at ``singles1_hz`` / ``singles2_hz``, Poisson events seen by both inputs at
``correlated_hz``, and, while the pulser output is on, one event on both inputs per pulser pulse
(periodic at the pulser frequency, height the pulser amplitude); all other heights ``height_mV``.
Another simulated module (a scintillator pair) passes its own ``source``.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np
from scipy.special import erfc

from drivers.sim.board import CoincidenceSpec
from drivers.sim.instrument import Call, Command, SimInstrument, command
from drivers.sim.pulser import Pulser
from drivers.sim.scpi_parser import STANDARD_ERRORS, format_float, parse_number, scpi_error

MAX_WAIT_S = 3600.0
MAX_WINDOW_S = 1e-6
MIN_WINDOW_S = 1e-9
MAX_DELAY_S = 1e-6
MAX_THRESHOLD_V = 2.5
#: Expected pulses per gate above which a gate is refused (-221 Settings conflict): bounded memory.
MAX_EXPECTED_PULSES = 2e7
DEFAULT_WINDOW_S = 20e-9


@dataclass(frozen=True)
class Train:
    """Pulses at one input during a gate: arrival times (s, from the gate start) and heights (mV)."""

    times_s: np.ndarray
    heights_mV: np.ndarray


#: (gate seconds, rng) -> the trains at inputs 1 and 2, before the unit's thresholds and delays.
TrainSource = Callable[[float, np.random.Generator], tuple[Train, Train]]


def count_coincidences(t1_s: np.ndarray, t2_s: np.ndarray, tau_s: float) -> int:
    """Pulses of train 1 with at least one pulse of train 2 within ``|t₂ - t₁| < tau_s``."""
    if t1_s.size == 0 or t2_s.size == 0:
        return 0
    t1, t2 = np.sort(t1_s), np.sort(t2_s)  # sorted needles: searchsorted runs 10x faster
    lo = np.searchsorted(t2, t1 - tau_s, side="right")
    hi = np.searchsorted(t2, t1 + tau_s, side="left")
    return int(np.count_nonzero(hi > lo))


def poisson_times(rate_hz: float, gate_s: float, rng: np.random.Generator) -> np.ndarray:
    """Arrival times of a Poisson process of ``rate_hz`` over [0, gate_s)."""
    n = int(rng.poisson(rate_hz * gate_s)) if rate_hz > 0 else 0
    return rng.uniform(0.0, gate_s, n)


def expected_pulses(spec: CoincidenceSpec, pulser: Pulser, gate_s: float) -> float:
    """Mean number of pulses the default source draws in one gate (both inputs)."""
    rates = spec.singles1_hz + spec.singles2_hz + 2 * spec.correlated_hz
    return rates * gate_s + 2 * pulser.trials(gate_s)


def board_source(spec: CoincidenceSpec, pulser: Pulser) -> TrainSource:
    """The default source: random singles, random correlated events and the pulser's pulses."""

    def draw(gate_s: float, rng: np.random.Generator) -> tuple[Train, Train]:
        shared = [poisson_times(spec.correlated_hz, gate_s, rng)]
        shared_h = [np.full(shared[0].size, spec.height_mV)]
        trials = pulser.trials(gate_s)
        if trials:
            period = 1.0 / max(pulser.settings.frequency_hz, 1e-9)
            shared.append(np.arange(trials) * period)
            shared_h.append(np.full(trials, abs(pulser.amplitude_mV)))
        t_shared, h_shared = np.concatenate(shared), np.concatenate(shared_h)
        trains = []
        for rate in (spec.singles1_hz, spec.singles2_hz):
            own = poisson_times(rate, gate_s, rng)
            trains.append(
                Train(
                    np.concatenate([t_shared, own]),
                    np.concatenate([h_shared, np.full(own.size, spec.height_mV)]),
                )
            )
        return trains[0], trains[1]

    return draw


class CoincidenceUnit(SimInstrument):
    """The coincidence role."""

    role = "coincidence"
    model = "LTS-CU2"

    def __init__(
        self,
        *,
        spec: CoincidenceSpec,
        pulser: Pulser,
        seed: int,
        time_scale: float = 0.0,
        source: TrainSource | None = None,
        **kwargs: object,
    ) -> None:
        self.spec = spec
        self.pulser = pulser
        self.seed = seed
        self.time_scale = time_scale
        self.source = source if source is not None else board_source(spec, pulser)
        self.gates = 0
        self.result: tuple[int, int, int] | None = None
        self.gate_end = 0.0
        self._defaults()
        super().__init__(**kwargs)  # type: ignore[arg-type]

    def _defaults(self) -> None:
        self.window_s = DEFAULT_WINDOW_S
        self.delays_s = [0.0, 0.0]
        self.thresholds_V = [0.0, 0.0]
        self.gate_s = 0.1

    def reset(self) -> None:
        self._defaults()
        self.result = None

    def commands(self) -> Sequence[Command]:
        return [
            command(
                "[SENSe:]COINcidence:WINDow",
                write=self._set_window,
                query=lambda c: format_float(self.window_s),
            ),
            command("INPut#:DELay", write=self._set_delay, query=self._get_delay),
            command("INPut#:THReshold", write=self._set_threshold, query=self._get_threshold),
            command(
                "[SENSe:]GATE:TIME", write=self._set_gate, query=lambda c: format_float(self.gate_s)
            ),
            command("INITiate[:IMMediate]", write=lambda c: self.start_gate(), max_params=0),
            command("FETCh:COINcidence", query=self._fetch),
        ]

    # --- settings --------------------------------------------------------------------------------
    def _set_window(self, call: Call) -> None:
        self.window_s = parse_number(
            call.arg(), lo=MIN_WINDOW_S, hi=MAX_WINDOW_S, default=DEFAULT_WINDOW_S
        )

    def _set_delay(self, call: Call) -> None:
        n = call.suffix(0, hi=2)
        self.delays_s[n - 1] = parse_number(call.arg(), lo=0.0, hi=MAX_DELAY_S, default=0.0)

    def _get_delay(self, call: Call) -> str:
        return format_float(self.delays_s[call.suffix(0, hi=2) - 1])

    def _set_threshold(self, call: Call) -> None:
        n = call.suffix(0, hi=2)
        self.thresholds_V[n - 1] = parse_number(
            call.arg(), lo=-MAX_THRESHOLD_V, hi=MAX_THRESHOLD_V, default=0.0
        )

    def _get_threshold(self, call: Call) -> str:
        return format_float(self.thresholds_V[call.suffix(0, hi=2) - 1])

    def _set_gate(self, call: Call) -> None:
        self.gate_s = parse_number(call.arg(), lo=1e-6, hi=1000.0)

    # --- counting --------------------------------------------------------------------------------
    @property
    def resolving_time_s(self) -> float:
        """The true τ: the set window plus the board's ``resolving_extra_ns``."""
        return self.window_s + self.spec.resolving_extra_ns * 1e-9

    def start_gate(self) -> None:
        """Open a gate now and draw its counts (refused with -221 if it would need too many pulses)."""
        if expected_pulses(self.spec, self.pulser, self.gate_s) > MAX_EXPECTED_PULSES:
            self.result = None
            raise scpi_error(-221, "rates x gate exceed the simulator's pulse budget")
        self.gates += 1
        rng = np.random.default_rng([self.seed, self.instrument_id, self.gates])
        train1, train2 = self.source(self.gate_s, rng)
        t1 = self._fired(train1, 0, rng)
        t2 = self._fired(train2, 1, rng) + self.spec.skew_ns * 1e-9
        coincidences = count_coincidences(t1, t2, self.resolving_time_s)
        self.result = (coincidences, int(t1.size), int(t2.size))
        self.gate_end = self.clock() + self.gate_s * self.time_scale

    def _fired(self, train: Train, index: int, rng: np.random.Generator) -> np.ndarray:
        """Times (s) of the pulses input ``index`` fires on, delayed and jittered."""
        spec = self.spec
        threshold_mV = self.thresholds_V[index] * 1e3
        if spec.noise_mV > 0:
            p = 0.5 * erfc((threshold_mV - train.heights_mV) / (np.sqrt(2.0) * spec.noise_mV))
        else:
            p = (train.heights_mV > threshold_mV).astype(float)
        p = p * (spec.efficiency1, spec.efficiency2)[index]
        times = train.times_s[rng.random(train.times_s.size) < p]
        jitter = rng.normal(0.0, spec.jitter_ns * 1e-9, times.size) if spec.jitter_ns > 0 else 0.0
        return times + self.delays_s[index] + jitter

    def output_edge_ns(self, height_mV: float, rng: np.random.Generator) -> float | None:
        """For one pulser pulse seen by both inputs at t = 0 (height ``height_mV``): when the unit's
        logic output ``coinc`` starts (ns: the later input + ``output_delay_ns``), or None when the
        pair is not a coincidence (an input did not fire, or |t₂ − t₁| ≥ τ)."""
        one = Train(times_s=np.zeros(1), heights_mV=np.array([float(height_mV)]))
        t1, t2 = self._fired(one, 0, rng), self._fired(one, 1, rng) + self.spec.skew_ns * 1e-9
        if t1.size == 0 or t2.size == 0 or abs(t2[0] - t1[0]) >= self.resolving_time_s:
            return None
        return max(t1[0], t2[0]) * 1e9 + self.spec.output_delay_ns

    def _fetch(self, call: Call) -> str:
        if self.result is None:
            self.push_error(-230, STANDARD_ERRORS[-230])
            return "0,0,0"
        wait = self.gate_end - self.clock()
        if wait > 0:
            self.sleep(min(wait, MAX_WAIT_S))
        return ",".join(str(v) for v in self.result)

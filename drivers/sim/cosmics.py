"""Cosmic-ray muons through a simulated scintillator plate read at both fibre ends by two SiPMs.

Vertical muons cross the plate as a Poisson process at ``area_cm2 · muon_rate_per_cm2_min / 60`` Hz
(about 1 per cm² per minute on a horizontal surface at sea level: PDG Review of Particle Physics,
"Cosmic rays", from memory).  Each deposits light drawn from ``scipy.stats.landau(loc, scale)`` with
scale = ``landau_width_pe`` and its mode at ``mpv_pe`` (loc = mpv - scale·(-0.4293145), scipy's
parametrisation), clipped to [0, 50·mpv].  Sensor i sees that light scaled by exp(-fibre_i/λ_att) and
its ``light_scale`` as the mean of Poisson primary photoelectrons, then crosstalk and readout noise
(:mod:`drivers.sim.sipm`).  Each input also gets uncorrelated pulses at ``singles_rate_hz`` with
exponential light of mean ``singles_mean_pe``.  The coincidence unit sees unsigned pulse heights.

The pulse-height analyser's COINcidence trigger histograms, per trigger, the height at its input of a
muon that fired both inputs at the unit's thresholds (accidentals left out: at these rates they are
below 10⁻³ of the triggers); the acquisition lasts events / (muon rate × fraction firing both).
"""

from __future__ import annotations

import math

import numpy as np
from scipy import special, stats

from drivers.sim.coincidence import CoincidenceUnit, Train, poisson_times
from drivers.sim.scpi_parser import scpi_error
from drivers.sim.sensor import PlateSpec
from drivers.sim.sensor_rig import SensorRig
from drivers.sim.sipm import add_crosstalk, branching_lambda, height_per_cell_mV, heights_mV

LANDAU_MODE = -0.4293145
MAX_BATCHES = 200


class CosmicPlate:
    """The plate's muons and light as seen by the module's first two sensors."""

    def __init__(self, rig: SensorRig, plate: PlateSpec) -> None:
        self.rig = rig
        self.plate = plate

    def light_pe(self, rng: np.random.Generator, n: int) -> np.ndarray:
        """Mean primary photoelectrons at sensors 1 and 2 for ``n`` muons: shape (n, 2)."""
        p = self.plate
        loc = p.mpv_pe - p.landau_width_pe * LANDAU_MODE
        deposit = stats.landau.rvs(loc=loc, scale=p.landau_width_pe, size=n, random_state=rng)
        deposit = np.clip(deposit, 0.0, 50.0 * p.mpv_pe)
        scale = [
            math.exp(-p.fibre_cm[i] / p.attenuation_length_cm)
            * self.rig.spec.sensors[i].light_scale
            for i in (0, 1)
        ]
        return deposit[:, None] * np.array(scale)[None, :]

    def _cells(self, rng: np.random.Generator, light: np.ndarray, index: int) -> np.ndarray:
        over = self.rig.over_V(index + 1)
        lam = branching_lambda(self.rig.spec.sensors[index], over)
        return add_crosstalk(rng, rng.poisson(light), lam)

    def heights(self, rng: np.random.Generator, light: np.ndarray, index: int) -> np.ndarray:
        """Signed readout heights (mV, with baseline) at sensor ``index`` (0-based)."""
        sipm = self.rig.spec.sensors[index]
        a1 = height_per_cell_mV(sipm, self.rig.spec.readout, self.rig.over_V(index + 1))
        return heights_mV(rng, self._cells(rng, light, index), a1, sipm, self.rig.spec.readout)

    def pulse_heights(self, rng: np.random.Generator, light: np.ndarray, index: int) -> np.ndarray:
        """Unsigned pulse heights above the baseline (what the coincidence unit compares)."""
        readout = self.rig.spec.readout
        return readout.sign * (self.heights(rng, light, index) - readout.baseline_mV)

    def singles_heights(self, rng: np.random.Generator, n: int, index: int) -> np.ndarray:
        """Unsigned heights of uncorrelated pulses: exponential light of mean ``singles_mean_pe``
        times the mean charge per photoelectron (crosstalk as its mean, 1/(1 - λ)), plus noise.
        Drawn in closed form, not pulse by pulse: a long gate holds millions of them."""
        sipm = self.rig.spec.sensors[index]
        over = self.rig.over_V(index + 1)
        a1 = height_per_cell_mV(sipm, self.rig.spec.readout, over)
        per_pe = a1 / (1.0 - branching_lambda(sipm, over))
        light = rng.exponential(self.plate.singles_mean_pe, n)
        return light * per_pe + rng.normal(0.0, self.rig.spec.readout.noise_mV, n)

    def trains(self, gate_s: float, rng: np.random.Generator) -> tuple[Train, Train]:
        """The coincidence unit's source: muons on both inputs plus each input's singles."""
        muons = poisson_times(
            self.plate.area_cm2 * self.plate.muon_rate_per_cm2_min / 60.0, gate_s, rng
        )
        light = self.light_pe(rng, muons.size)
        out = []
        for i in (0, 1):
            own = poisson_times(self.plate.singles_rate_hz[i], gate_s, rng)
            heights = np.concatenate(
                [self.pulse_heights(rng, light[:, i], i), self.singles_heights(rng, own.size, i)]
            )
            out.append(Train(np.concatenate([muons, own]), heights))
        return out[0], out[1]

    def triggered(self, unit: CoincidenceUnit):
        """The pulse-height analyser's COINcidence source, at the unit's present thresholds."""

        def source(
            rig: SensorRig, channel: int, events: int, rng: np.random.Generator
        ) -> tuple[np.ndarray, float]:
            if channel > 2:
                raise scpi_error(-221, "the coincidence trigger covers inputs 1 and 2")
            kept: list[np.ndarray] = []
            drawn = fired = 0
            for _ in range(MAX_BATCHES):
                light = self.light_pe(rng, 2 * events)
                heads = [self.heights(rng, light[:, i], i) for i in (0, 1)]
                both = np.ones(2 * events, dtype=bool)
                for i in (0, 1):
                    pulse = rig.spec.readout.sign * (heads[i] - rig.spec.readout.baseline_mV)
                    p = 0.5 * special.erfc(
                        (unit.thresholds_V[i] * 1e3 - pulse) / (math.sqrt(2.0) * unit.spec.noise_mV)
                    )
                    both &= rng.random(p.size) < p
                drawn += 2 * events
                fired += int(both.sum())
                kept.append(heads[channel - 1][both])
                if fired >= events:
                    break
            if fired == 0:
                raise scpi_error(-221, "no muon fires both inputs at these thresholds")
            heights = np.concatenate(kept)[:events]
            rate = self.plate.muon_rate_hz * fired / drawn
            return heights, heights.size / rate

        return source

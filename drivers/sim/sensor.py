"""The simulated light-sensor file: SiPMs on readout channels, an LED, optionally a scintillator plate.

A sensor file is told from a board file by its top-level ``sensors:`` list.  Every key has a default
(the table); an invented example is ``drivers/sim/boards/example-sipm.yaml``.

==================================  =========  =====================================================
key                                 default    meaning
==================================  =========  =====================================================
``serial``                          required   serial of the sensor (or module) under test
``sensor_type``                     SiPM3      its type in ``procedures/boards/`` (board type)
``seed``                            0          same seed, same draws: runs repeat exactly
``time_scale``                      0.0        real seconds per simulated second of gates and
                                               acquisitions (0: instant; the simulated clock runs
                                               faster than real time, stated in ``*IDN?`` model)
``temperature_C``                   25.0       temperature the sensor role reads (°C)
``temperature_noise_C``             0.02       RMS noise of that reading
``bias_resistance_Mohm``            100000     leakage path seen by the bias supply's meter
``readout.mV_per_fC``               0.05       amplitude at the readout per charge from the SiPM
``readout.noise_mV``                1.0        RMS electronic noise on each pulse height (σ₀)
``readout.baseline_mV``             0.0        DC level of the readout output
``readout.polarity``                positive   ``negative``: pulses go down from the baseline
``readout.discriminator_tau_ns``    5.0        noise bandwidth of the discriminator, as CR-RC²
``led.pe_per_V``                    1.5        mean photoelectrons per volt of pulser drive above …
``led.threshold_V``                 0.5        … the LED's turn-on drive
``sensors[].breakdown_V``           51.0       V_bd at ``reference_C``
``sensors[].reference_C``           25.0       temperature V_bd is given at
``sensors[].breakdown_coeff_mV_per_K`` 54.0    dV_bd/dT
``sensors[].cell_capacitance_fF``   100.0      C_cell: gain G = C·(V - V_bd)/e
``sensors[].dark_rate_hz_per_V``    50000.0    dark-count rate per volt of overvoltage (Poisson)
``sensors[].crosstalk_lambda_per_V`` 0.035     branching λ per volt of overvoltage
``sensors[].cell_gain_spread``      0.05       RMS cell-to-cell gain spread (σ₁ = spread·A₁)
``sensors[].light_scale``           1.0        fraction of the plate's (or LED's) light reaching it
``plate.area_cm2``                  400.0      plate area seen by vertical muons
``plate.muon_rate_per_cm2_min``     1.0        muon flux (PDG "Cosmic rays", ~1 /cm²/min, memory)
``plate.mpv_pe``                    30.0       most probable light of a vertical muon, in primary
                                               photoelectrons at a sensor on a fibre of length 0
``plate.landau_width_pe``           3.0        Landau width (scipy.stats.landau scale) in p.e.
                                               (a sensor sees both scaled by exp(-fibre/λ_att) and
                                               its ``light_scale``: a poorly coupled fibre < 1)
``plate.attenuation_length_cm``     300.0      fibre attenuation length λ_att
``plate.fibre_cm``                  [50, 50]   fibre length from the plate to each sensor
``plate.singles_rate_hz``           [300, 300] uncorrelated pulses at each sensor (radioactivity,
                                               dark pile-up), light exponential with mean
                                               ``plate.singles_mean_pe`` photoelectrons (its
                                               crosstalk as the mean factor 1/(1 - λ))
``plate.singles_mean_pe``           10.0       mean light of those pulses
==================================  =========  =====================================================

Physics (see :mod:`drivers.sim.sipm`): G = C_cell·(V - V_bd(T))/e with V_bd(T) = V_bd + k·(T - T_ref);
dark counts Poisson at ``dark_rate_hz_per_V``·(V - V_bd); each fired cell fires Poisson(λ)
neighbours (branching, Vinogradov arXiv:1109.2014), λ = ``crosstalk_lambda_per_V``·(V - V_bd).
"""

from __future__ import annotations

from dataclasses import dataclass, field

from drivers.sim.board import FaultSpec


@dataclass(frozen=True, kw_only=True)
class SipmSpec:
    """One silicon photomultiplier."""

    breakdown_V: float = 51.0
    reference_C: float = 25.0
    breakdown_coeff_mV_per_K: float = 54.0
    cell_capacitance_fF: float = 100.0
    dark_rate_hz_per_V: float = 50_000.0
    crosstalk_lambda_per_V: float = 0.035
    cell_gain_spread: float = 0.05
    light_scale: float = 1.0


@dataclass(frozen=True, kw_only=True)
class ReadoutSpec:
    """The readout channel behind each sensor."""

    mV_per_fC: float = 0.05
    noise_mV: float = 1.0
    baseline_mV: float = 0.0
    polarity: str = "positive"
    discriminator_tau_ns: float = 5.0

    @property
    def sign(self) -> int:
        return -1 if self.polarity == "negative" else 1


@dataclass(frozen=True, kw_only=True)
class LedSpec:
    """The LED light pulser driven by the pulse generator."""

    pe_per_V: float = 1.5
    threshold_V: float = 0.5


@dataclass(frozen=True, kw_only=True)
class PlateSpec:
    """A scintillator plate read at both fibre ends by the first two sensors."""

    area_cm2: float = 400.0
    muon_rate_per_cm2_min: float = 1.0
    mpv_pe: float = 30.0
    landau_width_pe: float = 3.0
    attenuation_length_cm: float = 300.0
    fibre_cm: tuple[float, float] = (50.0, 50.0)
    singles_rate_hz: tuple[float, float] = (300.0, 300.0)
    singles_mean_pe: float = 10.0

    @property
    def muon_rate_hz(self) -> float:
        return self.area_cm2 * self.muon_rate_per_cm2_min / 60.0


@dataclass(frozen=True, kw_only=True)
class SensorSpec:
    """Everything the simulator needs to play a sensor (or module) under test."""

    serial: str
    sensors: tuple[SipmSpec, ...]
    sensor_type: str = "SiPM3"
    seed: int = 0
    time_scale: float = 0.0
    temperature_C: float = 25.0
    temperature_noise_C: float = 0.02
    bias_resistance_Mohm: float = 100_000.0
    readout: ReadoutSpec = field(default_factory=ReadoutSpec)
    led: LedSpec = field(default_factory=LedSpec)
    plate: PlateSpec | None = None
    faults: tuple[FaultSpec, ...] = ()
    source: str = "<sensor>"

    @property
    def board_type(self) -> str:
        """The type name a run plans against (``sensor_type``)."""
        return self.sensor_type

    def faults_for(self, role: str) -> tuple[FaultSpec, ...]:
        return tuple(f for f in self.faults if f.role == role)

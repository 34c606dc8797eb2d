"""The simulated board file: typed, frozen specification of the board the simulator plays.

Keys fixed by DESIGN.md ("Simulated board file"): ``serial``, ``outputs``, ``shaper {order, tau_ns,
kind}``, ``crosstalk_pct``, ``bias_resistance_Mohm``, ``seed``, ``faults``, ``channels`` (``gain_x1,
gain_x5, baseline_mV, noise_in_mV, saturation_mV, discriminator_offset_mV, dead``).

Extra keys, each with its default:

============================  =========  ===========================================================
key                           default    meaning
============================  =========  ===========================================================
``board_type``                PA8        printed in the identity of the bench
``polarity``                  positive   ``negative``: the fast outputs (x1, x5) swing negative
``inverter``                  false      an inverter stage after the preamp flips the fast outputs
``output_polarity``           (none)     per output, ``positive`` or ``negative``, e.g. ``{shaped:
                                         negative}``; overrides ``polarity``/``inverter`` for that
                                         output (the shaped output is positive unless named here)
``pulse.rise_ns``             4.0        10-90 % rise time of the fast preamp pulse (ns)
``pulse.decay_ns``            40.0       decay time constant of the fast pulse (ns)
``pulse_delay_ns``            0.0        the pulses start this long after the trigger instant (a
                                         cable delay: every output, the discriminator unaffected)
``shaper.gain``               1.0        shaped peak = gain_x1 * A * shaper.gain (before tanh)
``adc_bits``                  12         digitizer resolution (6-16 bits)
``time_scale``                0.0        counter gates last gate_time * time_scale real seconds
``timing.<role>.*``           (below)    the bench's pace (:mod:`drivers.timing`): per role
                                         ``round_trip_ms`` (1), ``transfer_MBps`` (10),
                                         ``relay_settle_ms`` (2), ``rearm_us`` (0); accounted
                                         on the bench's clock, waited for with ``--realtime``
``discriminator_tau_ns``      5.0        noise bandwidth of the discriminator input, as CR-RC²
``dark_rate_hz``              0.0        rate of random dark pulses counted by the discriminator
``dark_height_mV``            10.0       their height at the x1 output
``bias_current_offset_nA``    0.02       offset of the bias supply's current meter
``bias_current_noise_nA``     0.002      RMS noise of the current meter
``bias_voltage_noise_mV``     1.0        RMS noise of the voltage meter
``coincidence.*``             (below)    the coincidence unit (:mod:`drivers.sim.coincidence`)
``converter.*``               (below)    the digitizer's converter with a sine input
``discriminator.*``           (below)    the discriminator's logic output ``disc``
============================  =========  ===========================================================

Section ``coincidence`` (every key optional):

============================  =========  ===========================================================
``singles1_hz``               0.0        independent Poisson pulses at input 1 (Hz)
``singles2_hz``               0.0        independent Poisson pulses at input 2 (Hz)
``correlated_hz``             0.0        Poisson events seen by both inputs (a source), Hz
``height_mV``                 100.0      height of those pulses at the inputs (mV, positive)
``noise_mV``                  1.0        RMS noise at each input threshold (mV)
``jitter_ns``                 0.5        RMS timing jitter of each input (ns)
``skew_ns``                   0.0        fixed extra delay of input 2 (a cable), ns
``resolving_extra_ns``        0.0        true resolving time minus the set window (ns; a fault)
``efficiency1``               1.0        probability input 1 fires on a pulse above threshold
``efficiency2``               1.0        the same for input 2
``output_width_ns``           10.0       width of the unit's logic output ``coinc`` (ns, the
                                         discriminator section's logic level, edges and noise)
``output_delay_ns``           8.0        later input to the output's leading edge (ns)
============================  =========  ===========================================================

Section ``converter`` (every key optional; :mod:`drivers.sim.converter`; used while the pulser runs
in sine mode, when every scope input sees the generator directly):

============================  =========  ===========================================================
``bits``                      0          converter resolution (6-16); 0: the board's ``adc_bits``
``dnl_rms_lsb``               0.0        RMS of a random code-width pattern (DNL), fixed by ``seed``
``missing_codes``             []         codes (1 .. 2^bits − 2) of zero width
``noise_lsb``                 0.3        RMS input-referred noise, in LSB
``aperture_jitter_ps``        0.0        RMS sampling-instant jitter (ps)
``bandwidth_mhz``             0.0        one-pole analogue bandwidth (MHz); 0: unlimited
============================  =========  ===========================================================

Section ``discriminator`` (every key optional; :mod:`drivers.sim.disc_output`; the logic output
``disc`` of each channel, routed to the scope like any output):

============================  ==============  ======================================================
``mode``                      leading_edge    ``leading_edge`` or ``constant_fraction``
``fraction``                  0.3             constant fraction f
``delay_ns``                  2.0             constant-fraction delay d (ns)
``propagation_ns``            5.0             input crossing to output edge (ns)
``width_ns``                  20.0            logic pulse width (ns)
``logic_mV``                  800.0           logic level (mV, positive-going)
``edge_ns``                   0.5             logic pulse edges, 0-100 % (ns)
``logic_noise_mV``            1.0             RMS noise on the logic output (mV)
============================  ==============  ======================================================

Channel defaults: gain_x1 1.0, gain_x5 5.0, baseline_mV 0, noise_in_mV 0.3, saturation_mV 1500,
discriminator_offset_mV 0, dead false.  A channel may also give ``output_baseline_mV``, the DC level
of named outputs (``{x1: 12, x5: -12}``; each between -5000 and 5000 mV): x1 and x5 sit behind
different stages, so their levels differ on a real board; an output not named sits at
``baseline_mV``.  The discriminator is AC-coupled and sees no DC level.  ``channels`` may also be a
count (``channels: 4``): that many channels with these defaults, for a module whose inputs have no
per-channel physics of their own (a digitizer's inputs, a coincidence unit).  Faults: see
:mod:`drivers.sim.faults`.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from types import MappingProxyType

from drivers.timing import DEFAULT_TIMING, BenchTiming

#: The instrument roles, in port order (port_base + index).
ROLES = ("pulser", "scope", "threshold", "counter", "bias", "switch", "coincidence")
#: Board outputs and the digit k of the switch route numbers.
OUTPUT_INDEX = MappingProxyType({"x1": 1, "x5": 2, "shaped": 3, "disc": 4, "coinc": 5})
FAULT_KINDS = (
    "interlock_open",
    "no_reply",
    "disconnect",
    "link_down",
    "garbled_reply",
    "scpi_error",
)
MAX_CHANNELS = 99  # the switch numbers channels with two digits


@dataclass(frozen=True, kw_only=True)
class ChannelSpec:
    """One channel of the board (DESIGN.md keys)."""

    gain_x1: float = 1.0
    gain_x5: float = 5.0
    baseline_mV: float = 0.0
    noise_in_mV: float = 0.3
    saturation_mV: float = 1500.0
    discriminator_offset_mV: float = 0.0
    dead: bool = False
    output_baseline_mV: Mapping[str, float] = field(default_factory=lambda: MappingProxyType({}))

    def baseline(self, output: str) -> float:
        """DC level (mV) of ``output``: ``output_baseline_mV`` when it names it, else
        ``baseline_mV``."""
        return float(self.output_baseline_mV.get(output, self.baseline_mV))


@dataclass(frozen=True, kw_only=True)
class ShaperSpec:
    """CR-RCⁿ (unipolar) or CR²-RCⁿ (bipolar) shaper: order n, time constant τ."""

    order: int = 4
    tau_ns: float = 50.0
    kind: str = "unipolar"
    gain: float = 1.0


@dataclass(frozen=True, kw_only=True)
class PulseSpec:
    """Fast preamp pulse: 10-90 % rise and decay; the solved time constants of the shape."""

    rise_ns: float = 4.0
    decay_ns: float = 40.0
    tau_rise_ns: float = 0.0
    tau_decay_ns: float = 0.0


@dataclass(frozen=True, kw_only=True)
class CoincidenceSpec:
    """The simulated coincidence unit's inputs and imperfections (keys in the table above)."""

    singles1_hz: float = 0.0
    singles2_hz: float = 0.0
    correlated_hz: float = 0.0
    height_mV: float = 100.0
    noise_mV: float = 1.0
    jitter_ns: float = 0.5
    skew_ns: float = 0.0
    resolving_extra_ns: float = 0.0
    efficiency1: float = 1.0
    efficiency2: float = 1.0
    output_width_ns: float = 10.0
    output_delay_ns: float = 8.0


@dataclass(frozen=True, kw_only=True)
class ConverterSpec:
    """The simulated digitizer's converter imperfections (keys in the table above)."""

    bits: int = 0
    dnl_rms_lsb: float = 0.0
    missing_codes: tuple[int, ...] = ()
    noise_lsb: float = 0.3
    aperture_jitter_ps: float = 0.0
    bandwidth_mhz: float = 0.0


DISCRIMINATOR_MODES = ("leading_edge", "constant_fraction")


@dataclass(frozen=True, kw_only=True)
class DiscriminatorSpec:
    """The discriminator's logic output ``disc`` (keys in the table above)."""

    mode: str = "leading_edge"
    fraction: float = 0.3
    delay_ns: float = 2.0
    propagation_ns: float = 5.0
    width_ns: float = 20.0
    logic_mV: float = 800.0
    edge_ns: float = 0.5
    logic_noise_mV: float = 1.0


@dataclass(frozen=True, kw_only=True)
class FaultSpec:
    """One injected fault; exactly one of ``after_s`` / ``after_commands`` is set."""

    kind: str
    role: str
    after_s: float | None = None
    after_commands: int | None = None
    #: Count ``after_s`` / ``after_commands`` from the first message starting with this text
    #: (case-insensitive), not from the first message: a fault placed at a stage of a procedure.
    after_message: str | None = None
    code: int = -300
    message: str = ""


@dataclass(frozen=True, kw_only=True)
class BoardSpec:
    """Everything the simulator needs to know about the board it plays."""

    serial: str
    channels: tuple[ChannelSpec, ...]
    board_type: str = "PA8"
    outputs: Mapping[str, float] = field(
        default_factory=lambda: MappingProxyType({"x1": 1.0, "x5": 5.0})
    )
    shaper: ShaperSpec = field(default_factory=ShaperSpec)
    pulse: PulseSpec = field(default_factory=PulseSpec)
    coincidence: CoincidenceSpec = field(default_factory=CoincidenceSpec)
    converter: ConverterSpec = field(default_factory=ConverterSpec)
    discriminator: DiscriminatorSpec = field(default_factory=DiscriminatorSpec)
    crosstalk_pct: float = 0.0
    bias_resistance_Mohm: float = 5000.0
    seed: int = 0
    faults: tuple[FaultSpec, ...] = ()
    polarity: str = "positive"
    inverter: bool = False
    output_polarity: Mapping[str, str] = field(default_factory=lambda: MappingProxyType({}))
    pulse_delay_ns: float = 0.0
    adc_bits: int = 12
    time_scale: float = 0.0
    discriminator_tau_ns: float = 5.0
    dark_rate_hz: float = 0.0
    dark_height_mV: float = 10.0
    bias_current_offset_nA: float = 0.02
    bias_current_noise_nA: float = 0.002
    bias_voltage_noise_mV: float = 1.0
    #: Command structure per role: ``{scope: wavescope, bias: sourcemeter}``; ``generic`` otherwise.
    command_sets: Mapping[str, str] = field(default_factory=lambda: MappingProxyType({}))
    timing: BenchTiming = DEFAULT_TIMING
    source: str = "<board>"

    @property
    def fast_sign(self) -> int:
        """+1 or -1: the sign of the fast outputs after polarity and inverter."""
        sign = -1 if self.polarity == "negative" else 1
        return -sign if self.inverter else sign

    def sign(self, output: str) -> int:
        """+1 or -1: the direction pulses on ``output`` swing (``output_polarity`` first, then the
        fast outputs' ``fast_sign``; the shaped output is positive-going by default)."""
        named = self.output_polarity.get(output)
        if named is not None:
            return -1 if named == "negative" else 1
        return 1 if output == "shaped" else self.fast_sign

    def gain(self, channel: int, output: str) -> float:
        """Small-signal gain of ``output`` of board channel ``channel`` (1-based)."""
        spec = self.channels[channel - 1]
        if output == "x1":
            return spec.gain_x1
        if output == "x5":
            return spec.gain_x5
        return spec.gain_x1 * self.shaper.gain

    def faults_for(self, role: str) -> tuple[FaultSpec, ...]:
        """The faults that hit the instrument playing ``role``."""
        return tuple(f for f in self.faults if f.role == role)

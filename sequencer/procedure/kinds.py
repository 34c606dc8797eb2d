"""The step kinds of the procedure language: names, arguments, canonical units.

This table is the contract between the procedure layer (which validates a step against it, converts
every quantity with a unit into the canonical unit below and writes the JSON Schema from it) and the
engine (which has one handler per kind and receives ``PlannedStep.args`` already converted).

Canonical units: signal voltages mV, bias voltages V, pulse times ns, durations s, rates Hz, ramp rates
V/s, currents µA.  A value written with a unit in YAML (``40 mV``, ``0.2 V``, ``1 kHz``, ``50 ns``,
``5 V/s``) is converted; a bare number is taken in the canonical unit.

``measures``: the step reads something (its results are stored and replayed on resume instead of being
re-executed).  ``configures``: the step sets instrument state (re-applied on resume so the bench is in
the state the remaining steps expect).  ``hazard``: the step can make a voltage live.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any, Literal

Dimension = Literal[
    "voltage", "bias_voltage", "time", "duration", "frequency", "slew", "current",
    "int", "float", "bool", "str", "name", "names", "ints", "percent",
]

CANONICAL_UNIT: Mapping[str, str] = {
    "voltage": "mV",
    "bias_voltage": "V",
    "time": "ns",
    "duration": "s",
    "frequency": "Hz",
    "slew": "V/s",
    "current": "uA",
    "percent": "%",
}


@dataclass(frozen=True)
class Arg:
    """One argument of a step kind."""

    name: str
    dimension: Dimension
    required: bool = True
    default: Any = None
    doc: str = ""
    choices: tuple[str, ...] = ()


@dataclass(frozen=True)
class StepKind:
    """A step kind: what it needs and what it does."""

    name: str
    role: str | None
    args: tuple[Arg, ...]
    doc: str
    measures: bool = False
    configures: bool = False
    hazard: bool = False
    produces: tuple[str, ...] = ()          # quantity names (DESIGN.md) an analysis step can produce
    extra: Mapping[str, Any] = field(default_factory=dict)

    def arg(self, name: str) -> Arg | None:
        """The argument called ``name``, if the kind has one."""
        return next((a for a in self.args if a.name == name), None)


def _k(name: str, role: str | None, doc: str, *args: Arg, **flags: Any) -> StepKind:
    return StepKind(name=name, role=role, args=tuple(args), doc=doc, **flags)


_TRACE_ANALYSIS = (
    Arg("traces", "name", doc="name given to the captured traces (scope.capture into)"),
    Arg("n_baseline", "int", required=False, default=0,
        doc="samples before the pulse used as baseline; 0 = every pre-trigger sample"),
)

_SENSOR_ANALYSIS = (
    Arg("histogram", "name", doc="name given to the pulse-height histograms (mca.acquire into)"),
    Arg("mV_per_fC", "float", doc="charge gain of the readout channel, from its own qualification"),
    Arg("polarity", "str", required=False, default="positive", choices=("positive", "negative")),
)

KINDS: Mapping[str, StepKind] = {k.name: k for k in (
    # -- pulser -----------------------------------------------------------------------------------
    _k("pulser.amplitude", "pulser", "set the test-pulse amplitude",
       Arg("mV", "voltage", doc="pulse amplitude"), configures=True),
    _k("pulser.shape", "pulser", "set pulse width and edge times",
       Arg("width", "time", required=False), Arg("leading", "time", required=False),
       Arg("trailing", "time", required=False), configures=True),
    _k("pulser.rate", "pulser", "set the pulse repetition rate", Arg("hz", "frequency"), configures=True),
    _k("pulser.burst", "pulser", "pulses per trigger (0 = continuous)", Arg("count", "int"), configures=True),
    _k("pulser.output", "pulser", "switch the pulser output", Arg("on", "bool"), configures=True),
    _k("pulser.trigger", "pulser", "send one trigger (*TRG)"),
    _k("pulser.sine", "pulser", "continuous sine (digitizer tests): frequency, peak amplitude, offset",
       Arg("frequency", "frequency"), Arg("amplitude", "voltage", doc="peak, not peak-to-peak"),
       Arg("offset", "voltage", required=False, default=0.0), configures=True),
    _k("pulser.pulses", "pulser", "back to test pulses after pulser.sine", configures=True),
    # -- scope / digitizer ------------------------------------------------------------------------
    _k("scope.input", "scope", "range and offset of one scope input",
       Arg("input", "int"), Arg("range", "voltage", doc="full scale, +/- half"),
       Arg("offset", "voltage", required=False, default=0.0),
       Arg("follow_baseline", "bool", required=False, default=False,
           doc="centre the range on baseline_mV measured earlier in the run for the step's "
               "channel and output (plus offset)"),
       configures=True),
    _k("scope.timebase", "scope", "sample rate, record length and pre-trigger time",
       Arg("sample_rate", "frequency"), Arg("points", "int"),
       Arg("pretrigger", "time", required=False, default=0.0), configures=True),
    _k("scope.trigger", "scope", "trigger source and level",
       Arg("source", "str"), Arg("level", "voltage", required=False, default=0.0), configures=True),
    _k("scope.average", "scope", "number of acquisitions averaged per capture", Arg("count", "int"),
       configures=True),
    _k("scope.capture", "scope",
       "acquire and fetch traces from one or more inputs; with target_uncertainty, capture again "
       "until the pulse height's standard error of the mean reaches it (GUM Type A; min 3, max 16 "
       "captures unless given), the traces averaged over the captures",
       Arg("inputs", "ints", doc="scope inputs, e.g. [1] or [1, 2, 3]"),
       Arg("into", "names", doc="one trace name per input"),
       Arg("target_uncertainty", "voltage", required=False,
           doc="repeat the capture until the pulse height on the first input has this standard "
               "error of the mean (GUM Type A, JCGM 100:2008 4.2); unset or 0 = one capture"),
       Arg("noise_target", "percent", required=False,
           doc="noise records: repeat the capture until the RMS of the first input's samples has "
               "this relative standard uncertainty, their correlation counted (1/sqrt(2 dof), "
               "GUM E.4.3; Bartlett's effective samples); every capture kept; unset or 0 = one"),
       Arg("min_captures", "int", required=False,
           doc="captures at least, with a target (unset: 3 for target_uncertainty, 1 for "
               "noise_target)"),
       Arg("max_captures", "int", required=False,
           doc="captures at most, with a target (unset: 16 for target_uncertainty, 8 for "
               "noise_target)"),
       measures=True),
    # -- threshold DAC, counter -------------------------------------------------------------------
    _k("threshold.level", "threshold", "set a discriminator threshold",
       Arg("channel", "int"), Arg("mV", "voltage"), configures=True),
    _k("counter.gate", "counter", "counting gate time", Arg("seconds", "duration"), configures=True),
    _k("counter.count", "counter", "count discriminator firings over one gate",
       Arg("channel", "int"), Arg("into", "name"), measures=True),
    _k("counter.scan", "counter",
       "adaptive S-curve: sets the threshold DAC and counts gates where they constrain the 50 % "
       "point and the width most, until both reach their target uncertainty",
       Arg("channel", "int"),
       Arg("centre", "voltage", doc="expected 50 % point at the discriminator (signed)"),
       Arg("window", "voltage", doc="half width of the coarse look around the centre"),
       Arg("trials", "int", doc="pulses per gate (pulser rate x gate time)"),
       Arg("target", "voltage", doc="standard uncertainty of the 50 % point to reach"),
       Arg("target_sigma", "voltage", doc="standard uncertainty of the width to reach"),
       Arg("max_gates", "int", required=False, default=60, doc="gate budget"),
       Arg("coarse", "int", required=False, default=5, doc="evenly spaced gates of the coarse look"),
       Arg("x", "name", required=False, default="thr",
           doc="the name analyses give its thresholds (as a sweep variable's)"),
       Arg("into", "name"), measures=True),
    # -- coincidence unit -------------------------------------------------------------------------
    _k("coincidence.window", "coincidence", "coincidence window: inputs closer than this coincide",
       Arg("ns", "time"), configures=True),
    _k("coincidence.delay", "coincidence",
       "delay of input 2 after input 1 (negative: input 1 delayed instead)", Arg("ns", "time"),
       configures=True),
    _k("coincidence.threshold", "coincidence", "threshold of one input of the coincidence unit",
       Arg("input", "int"), Arg("mV", "voltage"), configures=True),
    _k("coincidence.gate", "coincidence", "coincidence counting gate time", Arg("seconds", "duration"),
       configures=True),
    _k("coincidence.count", "coincidence", "coincidences and both inputs' singles over one gate",
       Arg("into", "name"), measures=True),
    # -- bias supply ------------------------------------------------------------------------------
    _k("bias.limit", "bias", "current limit (trip)", Arg("current", "current"), configures=True),
    _k("bias.ramp", "bias", "ramp the bias voltage (never a step) and wait until it is reached",
       Arg("volts", "bias_voltage"), Arg("rate", "slew", required=False), configures=True,
       hazard=True),
    _k("bias.output", "bias", "switch the bias output", Arg("on", "bool"), configures=True,
       hazard=True),
    _k("bias.read", "bias", "measure bias voltage and current", Arg("into", "name"), measures=True),
    # -- channel switch ---------------------------------------------------------------------------
    _k("switch.route", "switch", "route a board channel and output to a scope input",
       Arg("channel", "int"), Arg("output", "str"), Arg("input", "int"), configures=True),
    _k("switch.inject", "switch", "select the channel that receives the test pulse",
       Arg("channel", "int"), configures=True),
    _k("switch.open_all", "switch", "open every relay", configures=True),
    # -- light sensors: pulse-height analyser, temperature -----------------------------------------
    _k("mca.range", "mca", "histogram range and bins of the pulse-height analyser",
       Arg("lower", "voltage"), Arg("upper", "voltage"), Arg("bins", "int"), configures=True),
    _k("mca.trigger", "mca", "what triggers the pulse-height analyser",
       Arg("source", "str", choices=("EXTernal", "COINcidence"),
           doc="EXTernal: the pulser's sync (one trigger per LED pulse); COINcidence: the module's"),
       configures=True),
    _k("mca.acquire", "mca", "histogram the pulse heights of one input over a number of triggers",
       Arg("channel", "int"), Arg("events", "int"), Arg("into", "name"),
       Arg("expected", "duration", required=False, default=0.0,
           doc="how long the triggers take (reply timeout and plan estimate)"),
       measures=True),
    _k("temperature.read", "temperature", "read the temperature beside the device (deg C)",
       Arg("into", "name"), measures=True),
    # -- flow -------------------------------------------------------------------------------------
    _k("wait", None, "settle for a time", Arg("seconds", "duration")),
    _k("prompt", None, "show a message to the operator and wait for acknowledgement or a value",
       Arg("message", "str"), Arg("enter", "name", required=False, doc="store the typed value under this name"),
       measures=True),
    # -- analysis (sequencer.analysis) ------------------------------------------------------------
    _k("analyse.transfer", None, "gain, offset and INL from pulse heights over an amplitude sweep",
       *_TRACE_ANALYSIS, Arg("x", "name", doc="the sweep variable holding the injected amplitude (mV)"),
       Arg("method", "str", required=False, default="peak", choices=("peak", "template")),
       Arg("deviation", "percent", required=False, default=1.0, doc="dynamic range: deviation from the line"),
       produces=("gain", "offset_mV", "inl_pct")),
    _k("analyse.noise", None, "input-referred noise: baseline RMS divided by the measured gain",
       Arg("traces", "name"), Arg("n_baseline", "int", required=False, default=0,
                                  doc="0 = the whole trace"),
       Arg("gain", "float", required=False, doc="V/V; default: the gain measured earlier in the run"),
       produces=("noise_in_mV",)),
    _k("analyse.baseline", None, "DC level of an output: mean of its baseline with no injection",
       Arg("traces", "name"), Arg("n_baseline", "int", required=False, default=0,
                                  doc="0 = the whole trace"),
       produces=("baseline_mV",)),
    _k("analyse.crosstalk", None, "victim amplitude over aggressor amplitude",
       Arg("aggressor", "name"), Arg("victim", "name"), Arg("victim_channel", "int"),
       Arg("aggressor_channel", "int"), Arg("n_baseline", "int", required=False, default=0),
       produces=("crosstalk_pct",)),
    _k("analyse.s_curve", None, "fit the discriminator S-curve of counts over a threshold sweep",
       Arg("counts", "name"), Arg("x", "name", doc="sweep variable holding the threshold (mV)"),
       Arg("trials", "int", doc="pulses sent per gate"),
       produces=("threshold_mV", "threshold_sigma_mV")),
    _k("analyse.discriminator", None,
       "discriminator offset: intercept of the S-curve 50 % points against the pulse height",
       Arg("counts", "name"), Arg("x", "name"), Arg("amplitude", "name",
                                                   doc="sweep variable holding the injected amplitude"),
       Arg("trials", "int"), Arg("gain", "float", required=False,
                                 doc="x1 gain (V/V); default: measured earlier in the run"),
       produces=("discriminator_offset_mV",)),
    _k("analyse.peaking", None,
       "shaped output: fitted pulse onset to first peak in the output's direction "
       "(and zero crossing)",
       *_TRACE_ANALYSIS, produces=("peaking_time_ns",)),
    _k("analyse.rise", None, "fast output: 10 %-90 % rise time", *_TRACE_ANALYSIS,
       produces=("rise_time_ns",)),
    _k("analyse.delay_curve", None,
       "coincidence rate against input delay: resolving time (FWHM/2), plateau and efficiency",
       Arg("counts", "name", doc="name given to coincidence.count"),
       Arg("x", "name", doc="sweep variable holding the delay (ns)"),
       Arg("trials", "int", required=False, default=0,
           doc="correlated events sent per gate (pulser rate x gate); 0 = no efficiency"),
       produces=("resolving_time_ns", "coincidence_plateau_hz", "coincidence_efficiency_pct")),
    _k("analyse.accidentals", None,
       "accidental coincidences of independent inputs against R_acc = 2·τ·R1·R2",
       Arg("counts", "name", doc="name given to coincidence.count"),
       Arg("resolving_time", "time", required=False,
           doc="τ; default: the resolving time measured earlier in the run"),
       produces=("accidental_ratio",)),
    _k("analyse.fingers", None, "finger spectrum: gain per photoelectron and mean photoelectrons",
       *_SENSOR_ANALYSIS,
       produces=("sipm_gain", "pe_gain_mV", "mean_pe", "pedestal_mV", "excess_charge_factor")),
    _k("analyse.breakdown", None, "breakdown voltage: zero-gain intercept of the gain over a bias scan",
       *_SENSOR_ANALYSIS, Arg("x", "name", doc="sweep variable holding the bias voltage"),
       Arg("temperature", "name", required=False, doc="temperature.read reading"),
       Arg("reference", "float", required=False, default=25.0, doc="reference temperature, deg C"),
       Arg("coefficient", "float", required=False,
           doc="dV_bd/dT in mV/K from the sensor's data (needed with temperature)"),
       produces=("breakdown_V", "breakdown_ref_V", "gain_slope")),
    _k("analyse.staircase", None, "dark-count rate at 0.5 and 1.5 p.e. and optical crosstalk",
       Arg("counts", "name"), Arg("x", "name", doc="sweep variable holding the threshold (mV)"),
       Arg("gate", "duration"),
       produces=("dcr_kHz", "optical_crosstalk_pct")),
    _k("analyse.light_yield", None,
       "light yield: MPV of Landau x Gauss of the coincidence-triggered spectrum, in photoelectrons",
       Arg("histogram", "name", doc="mca.acquire into, with the COINcidence trigger"),
       produces=("light_yield_pe",)),
    _k("analyse.muon_rate", None, "coincidence rate less accidentals against the expected muon rate",
       Arg("counts", "name", doc="name given to coincidence.count"),
       Arg("resolving_time", "time", doc="τ of the coincidence (for the accidentals 2τR1R2)"),
       Arg("area_cm2", "float", doc="plate area seen by vertical muons"),
       Arg("flux_per_cm2_min", "float", required=False, default=1.0,
           doc="muons per cm² per minute (PDG 'Cosmic rays': about 1 at sea level)"),
       produces=("muon_rate_hz", "muon_efficiency_pct")),
    _k("analyse.walk", None,
       "time walk of a fast pulse over an amplitude sweep: leading edge and constant fraction",
       *_TRACE_ANALYSIS, Arg("x", "name", doc="sweep variable holding the injected amplitude"),
       Arg("threshold", "voltage", doc="leading-edge threshold (and constant-fraction arming level)"),
       Arg("fraction", "float", required=False, default=0.3, doc="constant fraction"),
       Arg("delay", "time", required=False, default=2.0, doc="constant-fraction delay"),
       produces=("time_walk_ns", "cf_walk_ns")),
    _k("analyse.jitter", None, "RMS of the leading-edge time over single captures at one amplitude",
       *_TRACE_ANALYSIS, Arg("threshold", "voltage"), produces=("timing_jitter_ns",)),
    _k("analyse.output_walk", None,
       "walk of the discriminator's logic output over an amplitude sweep (its edge at `level`)",
       *_TRACE_ANALYSIS, Arg("x", "name", doc="sweep variable holding the injected amplitude"),
       Arg("level", "voltage", doc="half the logic swing: where the output's edge is timed"),
       produces=("disc_walk_ns",)),
    _k("analyse.output_width", None,
       "width of the coincidence unit's logic output between its crossings of `level` (50 %)",
       *_TRACE_ANALYSIS, Arg("level", "voltage", doc="half the logic swing"),
       produces=("coincidence_width_ns",)),
    _k("analyse.output_jitter", None,
       "RMS of the discriminator's logic-output time over single captures at one amplitude",
       *_TRACE_ANALYSIS, Arg("level", "voltage", doc="half the logic swing"),
       produces=("disc_jitter_ns",)),
    _k("analyse.charge", None,
       "charge linearity of the shaped output: heights against Q = C·V through a test capacitor",
       *_TRACE_ANALYSIS, Arg("x", "name", doc="sweep variable holding the test-pulse amplitude"),
       Arg("capacitance", "float", doc="test capacitor in pF (1 pF × 1 mV = 1 fC)"),
       produces=("charge_gain_mV_per_fC", "charge_inl_pct")),
    _k("analyse.slow_adc", None,
       "the shaped peak reconstructed from a slow ADC's samples (every phase) against the full-rate peak",
       *_TRACE_ANALYSIS, Arg("period", "time", doc="slow ADC sampling period, a multiple of the capture's"),
       Arg("order", "int", doc="shaper order n (CR-RC^n)"), Arg("tau", "time", doc="shaper time constant"),
       Arg("method", "str", required=False, default="shape", choices=("shape", "parabola")),
       produces=("reconstruction_bias_pct", "reconstruction_rms_pct")),
    _k("analyse.zero_crossing", None,
       "zero crossing of a bipolar shaped pulse over an amplitude sweep: time from onset, walk",
       *_TRACE_ANALYSIS, Arg("x", "name", doc="sweep variable holding the injected amplitude"),
       produces=("zero_crossing_ns", "zero_crossing_walk_ns")),
    _k("analyse.sine", None,
       "four-parameter sine fit of each trace (IEEE 1057) -> SINAD and ENOB (IEEE 1241)",
       Arg("traces", "name"),
       Arg("frequency", "frequency", required=False, doc="start of the fit; default: the spectrum's peak"),
       produces=("sinad_db", "enob_bits")),
    _k("analyse.bandwidth", None,
       "amplitude of sines at several frequencies (fitted, aliases too) -> the -3 dB point",
       Arg("traces", "name"), Arg("x", "name", doc="sweep variable holding the sine frequency"),
       produces=("bandwidth_mhz",)),
    _k("analyse.code_density", None,
       "code-density (histogram) test of the traces' codes with a sine input -> DNL, INL, missing codes",
       Arg("traces", "name"), Arg("bits", "int", doc="converter resolution"),
       Arg("range", "voltage", doc="full scale set on the input (scope.input range)"),
       Arg("offset", "voltage", required=False, default=0.0),
       produces=("dnl_max_lsb", "inl_max_lsb", "missing_codes")),
    _k("analyse.leakage", None, "bias-line current at the test voltage",
       Arg("reading", "name", doc="name given to bias.read"), produces=("leakage_nA",)),
)}

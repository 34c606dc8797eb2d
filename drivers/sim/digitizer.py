"""Simulated scope / digitizer with four inputs, wired to the board through the channel switch.

``*RST`` defaults and limits (SI units on the wire):

==========================================  =================  ====================================
setting                                     default            limits
==========================================  =================  ====================================
``SENSe:SWEep:SRATe``                       1 GS/s             1 kS/s - 5 GS/s
``SENSe:SWEep:POINts``                      1000               2 - 1 000 000
``SENSe:AVERage:COUNt``                     1                  1 - 65536
``SENSe:VOLTage<i>:RANGe:UPPer`` (full)     1 V (±0.5 V)       1 mV - 20 V
``SENSe:VOLTage<i>:OFFSet`` (centre)        0 V                ±10 V
``TRIGger:SEQuence:DELay`` (pre-trigger)    100 ns             ±1 ms
``TRIGger:SEQuence:SOURce`` / ``:LEVel``    EXTernal / 0 V     stored, not simulated
``FORMat:DATA``                             INTeger,16         INTeger,16 | REAL,32
``FORMat:BORDer``                           NORMal (big end.)  NORMal | SWAPped
==========================================  =================  ====================================

The resolution is the board file's ``adc_bits`` (default 12).  The scope is triggered by the pulser:
t = 0 is the trigger, the record starts at t0 = -delay.  ``INITiate`` acquires all four inputs at once
(what the switch routes to each; an unrouted input reads 0 V without noise); a pulse is present when
the pulser output is on and a channel is injected.  ``TRACe:PREamble? CHANnel<i>`` answers
``x_increment_s, x_origin_s, y_increment_V, y_origin_V, points, averages`` of the last acquisition
(volts = code · y_increment + y_origin; REAL,32 data are volts, increment 1, origin 0).  Noise of each
acquisition comes from ``np.random.default_rng([seed, instrument_id, capture_counter])``.

While the pulser runs in sine mode every input digitises the generator's sine through the converter
model of the board's ``converter`` section (:mod:`drivers.sim.converter`: DNL pattern, missing codes,
noise, aperture jitter, bandwidth); such records are single acquisitions (an average count above 1
is refused with -221).  So are captures of a discriminator's logic output ``disc``
(:mod:`drivers.sim.disc_output`), drawn once per capture from the noisy pulse the discriminator saw,
and of the coincidence unit's output ``coinc`` (the pulser's pulse at both its inputs, through the
unit's delays, jitter and window: ``output_width_ns`` wide, ``output_delay_ns`` after the later input).
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from drivers.scpi.blocks import format_block
from drivers.sim.adc import CODES_16, digitize
from drivers.sim.board import BoardSpec
from drivers.sim.coincidence import CoincidenceUnit
from drivers.sim.converter import convert, sine_volts, transitions
from drivers.sim.disc_output import fire_time_ns, logic_mV
from drivers.sim.instrument import Call, Command, SimInstrument, command
from drivers.sim.physics import band_limited_noise
from drivers.sim.pulser import Pulser
from drivers.sim.response import noise_rms_mV, noise_tau_ns, output_signal_mV
from drivers.sim.scpi_parser import (
    STANDARD_ERRORS,
    format_float,
    matches_word,
    parse_choice,
    parse_int,
    parse_number,
    scpi_error,
)
from drivers.sim.switch import SCOPE_INPUTS, Switch
from drivers.sim.threshold import ThresholdDac
from drivers.timing import acquisition_s, transfer_s


@dataclass(kw_only=True)
class ScopeSettings:
    """What the digitizer is set to."""

    sample_rate_hz: float = 1e9
    points: int = 1000
    averages: int = 1
    pretrigger_s: float = 100e-9
    trigger_source: str = "EXTernal"
    trigger_level_V: float = 0.0
    real32: bool = False
    full_scale_V: list[float] = field(default_factory=lambda: [1.0] * SCOPE_INPUTS)
    offset_V: list[float] = field(default_factory=lambda: [0.0] * SCOPE_INPUTS)


@dataclass(frozen=True)
class Record:
    """One acquisition of all inputs: codes and their calibration."""

    codes: np.ndarray  # int16, one row per input
    dt_s: float
    t0_s: float
    lsb_V: tuple[float, ...]
    offset_V: tuple[float, ...]
    averages: int


_SOURCE = re.compile(r"([A-Za-z]+)(\d+)$")


def parse_input(text: str) -> int:
    """``CHANnel<i>`` -> i (1..4)."""
    m = _SOURCE.match(text.strip())
    if not m or not matches_word(m.group(1), "CHANnel"):
        raise scpi_error(-224, text)
    value = int(m.group(2))
    if not 1 <= value <= SCOPE_INPUTS:
        raise scpi_error(-222, text)
    return value


class Digitizer(SimInstrument):
    """The scope role."""

    role = "scope"
    model = "LTS-DG4"

    def __init__(
        self,
        *,
        board: BoardSpec,
        pulser: Pulser,
        switch: Switch,
        threshold: ThresholdDac | None = None,
        coincidence: CoincidenceUnit | None = None,
        **kwargs: object,
    ) -> None:
        self.board = board
        self.pulser = pulser
        self.switch = switch
        self.threshold = threshold  # the discriminators' levels, for the logic output ``disc``
        self.coincidence = coincidence  # the unit whose output ``coinc`` the scope may see
        self.settings = ScopeSettings()
        self.record: Record | None = None
        self.captures = 0
        self._edges: np.ndarray | None = None  # the converter's transitions, drawn once
        super().__init__(**kwargs)  # type: ignore[arg-type]

    def reset(self) -> None:
        self.settings = ScopeSettings()
        self.record = None

    def commands(self) -> Sequence[Command]:
        return [
            command(
                "[SENSe:]VOLTage#:RANGe[:UPPer]",
                write=lambda c: self._set_input(c, "full_scale_V", 1e-3, 20.0),
                query=lambda c: self._get_input(c, "full_scale_V"),
            ),
            command(
                "[SENSe:]VOLTage#:OFFSet",
                write=lambda c: self._set_input(c, "offset_V", -10.0, 10.0),
                query=lambda c: self._get_input(c, "offset_V"),
            ),
            command(
                "[SENSe:]SWEep:SRATe",
                write=lambda c: self._set("sample_rate_hz", c, 1e3, 5e9),
                query=lambda c: format_float(self.settings.sample_rate_hz),
            ),
            command(
                "[SENSe:]SWEep:POINts",
                write=lambda c: self._set_int("points", c, 2, 1_000_000),
                query=lambda c: str(self.settings.points),
            ),
            command(
                "[SENSe:]AVERage:COUNt",
                write=lambda c: self._set_int("averages", c, 1, 65536),
                query=lambda c: str(self.settings.averages),
            ),
            command(
                "TRIGger[:SEQuence]:SOURce",
                write=self._set_trigger_source,
                query=lambda c: self.settings.trigger_source,
            ),
            command(
                "TRIGger[:SEQuence]:LEVel",
                write=lambda c: self._set("trigger_level_V", c, -10.0, 10.0),
                query=lambda c: format_float(self.settings.trigger_level_V),
            ),
            command(
                "TRIGger[:SEQuence]:DELay",
                write=lambda c: self._set("pretrigger_s", c, -1e-3, 1e-3),
                query=lambda c: format_float(self.settings.pretrigger_s),
            ),
            command(
                "FORMat[:DATA]",
                write=self._set_format,
                max_params=2,
                query=lambda c: "REAL,32" if self.settings.real32 else "INT,16",
            ),
            command("INITiate[:IMMediate]", write=lambda c: self.acquire(), max_params=0),
            command("TRACe:PREamble", query=self._preamble, max_query_params=1),
            command("TRACe[:DATA]", query=self._data, max_query_params=1),
        ]

    # --- settings ------------------------------------------------------------------------------
    def _set(self, name: str, call: Call, lo: float, hi: float) -> None:
        setattr(self.settings, name, parse_number(call.arg(), lo=lo, hi=hi))

    def _set_int(self, name: str, call: Call, lo: int, hi: int) -> None:
        setattr(self.settings, name, parse_int(call.arg(), lo=lo, hi=hi))

    def _set_input(self, call: Call, name: str, lo: float, hi: float) -> None:
        index = call.suffix(0, hi=SCOPE_INPUTS) - 1
        getattr(self.settings, name)[index] = parse_number(call.arg(), lo=lo, hi=hi)

    def _get_input(self, call: Call, name: str) -> str:
        return format_float(getattr(self.settings, name)[call.suffix(0, hi=SCOPE_INPUTS) - 1])

    def _set_trigger_source(self, call: Call) -> None:
        text = call.arg()
        if _SOURCE.match(text):
            self.settings.trigger_source = f"CHAN{parse_input(text)}"
        else:
            self.settings.trigger_source = parse_choice(text, ("IMMediate", "EXTernal")).upper()[:3]

    def _set_format(self, call: Call) -> None:
        kind = parse_choice(call.arg(0), ("INTeger", "REAL"))
        width = (
            parse_int(call.params[1], lo=1, hi=64)
            if len(call.params) > 1
            else (16 if kind == "INTeger" else 32)
        )
        if (kind, width) not in (("INTeger", 16), ("REAL", 32)):
            raise scpi_error(-224, f"{kind},{width}")
        self.settings.real32 = kind == "REAL"

    # --- acquisition ---------------------------------------------------------------------------
    def acquire(self) -> None:
        """Acquire all inputs (the average of ``averages`` triggers) into :attr:`record`."""
        s = self.settings
        board = self.board
        if self.pulser.sine_on and s.averages > 1:
            raise scpi_error(-221, "the converter model acquires single records of the sine")
        routed = (self.switch.source_of(i) for i in range(1, SCOPE_INPUTS + 1))
        logic = any(src is not None and src[0] in ("disc", "coinc") for src in routed)
        if s.averages > 1 and logic:
            raise scpi_error(-221, "a discriminator's logic output is captured single-shot")
        self.captures += 1
        started = self.pace.mark()
        rng = np.random.default_rng([board.seed, self.instrument_id, self.captures])
        if self.pulser.sine_on:
            self._acquire_sine(rng)
        else:
            self._acquire_pulses(rng)
        self.take("acquisition", self.acquisition_s(), since=started)

    def acquisition_s(self) -> float:
        """How long a real acquisition of the current settings takes (drivers/timing.py): the
        external trigger comes from the pulser's sync output once per period (assumed to run with
        the pulse output off too, as the noise captures need); any other source triggers at once."""
        s = self.settings
        rate = self.pulser.settings.frequency_hz if s.trigger_source == "EXT" else 0.0
        return acquisition_s(averages=s.averages, points=s.points, sample_rate_hz=s.sample_rate_hz,
                             trigger_rate_hz=rate, rearm_s=self.timing.rearm_s)  # fmt: skip

    def _acquire_pulses(self, rng: np.random.Generator) -> None:
        s = self.settings
        board = self.board
        dt_ns = 1e9 / s.sample_rate_hz
        t_ns = -s.pretrigger_s * 1e9 + dt_ns * np.arange(s.points)
        on = self.pulser.settings.output_on
        injected = self.switch.injected if on else None
        volts = np.zeros((SCOPE_INPUTS, s.points))
        sigma = np.zeros(SCOPE_INPUTS)
        streams: dict[tuple[int, str], int] = {}  # (channel, fast|shaped) -> noise row
        rows: list[int] = []
        for i in range(1, SCOPE_INPUTS + 1):
            source = self.switch.source_of(i)
            if source is None:
                rows.append(-1)
                continue
            output, channel = source
            if output in ("disc", "coinc"):  # logic outputs, drawn once per capture
                volts[i - 1] = 1e-3 * (
                    self._logic(channel, injected, t_ns, rng)
                    if output == "disc"
                    else self._coincidence_logic(t_ns, rng)
                )
                sigma[i - 1] = 1e-3 * board.discriminator.logic_noise_mV
                key = channel if output == "disc" else -channel  # own noise per logic output
                rows.append(streams.setdefault((key, "disc"), len(streams)))
                continue
            volts[i - 1] = 1e-3 * output_signal_mV(
                board,
                channel,
                output,
                injected=injected,
                amplitude_mV=self.pulser.amplitude_mV,
                t_ns=t_ns,
            )
            sigma[i - 1] = 1e-3 * noise_rms_mV(board, channel, output)
            rows.append(
                streams.setdefault(
                    (channel, "shaped" if output == "shaped" else "fast"), len(streams)
                )
            )
        noise = self._noise(rng, streams, s.points, dt_ns, rows)
        codes = digitize(
            volts,
            noise,
            sigma,
            averages=s.averages,
            full_scale_V=np.array(s.full_scale_V),
            offset_V=np.array(s.offset_V),
            bits=board.adc_bits,
            rng=rng,
        )
        self.record = Record(
            codes=codes,
            dt_s=dt_ns * 1e-9,
            t0_s=-s.pretrigger_s,
            lsb_V=tuple(fs / CODES_16 for fs in s.full_scale_V),
            offset_V=tuple(s.offset_V),
            averages=s.averages,
        )

    def _acquire_sine(self, rng: np.random.Generator) -> None:
        """Every input digitises the generator's sine through the converter model."""
        s, board, gen = self.settings, self.board, self.pulser.settings
        spec = board.converter
        bits = spec.bits or board.adc_bits
        if self._edges is None:
            self._edges = transitions(spec, bits, board.seed)
        dt_s = 1.0 / s.sample_rate_hz
        t_s = -s.pretrigger_s + dt_s * np.arange(s.points)
        phase = float(rng.uniform(0.0, 2.0 * np.pi))  # one generator, split to every input
        codes = np.vstack(
            [
                convert(
                    sine_volts(
                        spec,
                        t_s=t_s,
                        frequency_hz=gen.frequency_hz,
                        amplitude_V=gen.amplitude_V,
                        offset_V=gen.offset_V,
                        phase_rad=phase,
                        rng=rng,
                    ),
                    full_scale_V=s.full_scale_V[i],
                    offset_V=s.offset_V[i],
                    bits=bits,
                    edges=self._edges,
                    noise_lsb=spec.noise_lsb,
                    rng=rng,
                )
                for i in range(SCOPE_INPUTS)
            ]
        )
        self.record = Record(
            codes=codes,
            dt_s=dt_s,
            t0_s=-s.pretrigger_s,
            lsb_V=tuple(fs / CODES_16 for fs in s.full_scale_V),
            offset_V=tuple(s.offset_V),
            averages=1,
        )

    def _logic(
        self, channel: int, injected: int | None, t_ns: np.ndarray, rng: np.random.Generator
    ) -> np.ndarray:
        """The logic output of ``channel``'s discriminator for this capture (no injection, no
        pulse: the noise-only firings are the counter's business)."""
        if injected != channel or self.threshold is None:
            return logic_mV(self.board, None, t_ns)
        level = self.threshold.level_mV(channel)
        fired = fire_time_ns(self.board, channel, self.pulser.amplitude_mV, level, rng)
        return logic_mV(self.board, fired, t_ns)

    def _coincidence_logic(self, t_ns: np.ndarray, rng: np.random.Generator) -> np.ndarray:
        """The coincidence unit's output for the pulser pulse both its inputs see (pulser on)."""
        unit = self.coincidence
        if unit is None or not self.pulser.settings.output_on:
            return logic_mV(self.board, None, t_ns)
        edge = unit.output_edge_ns(self.pulser.amplitude_mV, rng)
        spec = self.board.coincidence
        start = None if edge is None else self.board.pulse_delay_ns + edge
        return logic_mV(self.board, start, t_ns, delay_ns=0.0, width_ns=spec.output_width_ns)

    def _noise(
        self,
        rng: np.random.Generator,
        streams: dict[tuple[int, str], int],
        points: int,
        dt_ns: float,
        rows: list[int],
    ) -> np.ndarray:
        """Unit-RMS noise per input: x1 and x5 of one channel share their preamp's stream."""
        drawn = np.zeros((max(len(streams), 1), points))
        for kind in ("fast", "shaped", "disc"):
            members = [row for (channel, k), row in streams.items() if k == kind]
            if members:
                tau = (
                    self.board.discriminator.edge_ns
                    if kind == "disc"
                    else noise_tau_ns(self.board, "shaped" if kind == "shaped" else "x1")
                )
                drawn[members] = band_limited_noise(rng, len(members), points, dt_ns, tau)
        noise = np.zeros((SCOPE_INPUTS, points))
        for i, row in enumerate(rows):
            if row >= 0:
                noise[i] = drawn[row]
        return noise

    # --- read-out ------------------------------------------------------------------------------
    def _preamble(self, call: Call) -> str:
        index = parse_input(call.arg()) - 1
        rec = self.record
        s = self.settings
        if rec is None:
            values = [
                1.0 / s.sample_rate_hz,
                -s.pretrigger_s,
                s.full_scale_V[index] / CODES_16,
                s.offset_V[index],
                s.points,
                s.averages,
            ]
        else:
            values = [
                rec.dt_s,
                rec.t0_s,
                rec.lsb_V[index],
                rec.offset_V[index],
                rec.codes.shape[1],
                rec.averages,
            ]
        if s.real32:
            values[2:4] = [1.0, 0.0]
        return ",".join(format_float(v) for v in values)

    def _data(self, call: Call) -> bytes:
        index = parse_input(call.arg()) - 1
        rec = self.record
        if rec is None:  # answer an empty block so the client does not wait for a reply
            self.push_error(-230, STANDARD_ERRORS[-230])
            return format_block(b"")
        if self.settings.real32:
            volts = rec.codes[index] * rec.lsb_V[index] + rec.offset_V[index]
            block = format_block(volts, kind="float32", big_endian=self.big_endian)
        else:
            block = format_block(rec.codes[index], kind="int16", big_endian=self.big_endian)
        self.take("transfer", transfer_s(len(block), self.timing))
        return block

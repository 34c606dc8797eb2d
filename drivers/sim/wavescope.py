"""Simulated scope with a waveform subsystem (board file ``command_sets: {scope: wavescope}``);
acquisition and physics are the generic digitizer's (:mod:`drivers.sim.digitizer`).

======================================  =========================================================
``CHANnel<i>:SCALe <V/div>``            8 divisions: full scale = 8 × scale
``CHANnel<i>:OFFSet <V>``               centre of the range
``ACQuire:POINts <n>``                  record length
``TIMebase:SCALe <s/div>``              10 divisions: sample rate = points / (10 × scale)
``TIMebase:REFerence <s>``              time from the first sample to the trigger (pre-trigger)
``ACQuire:TYPE NORMal|AVERage``         averaging on or off; ``ACQuire:COUNt <n>`` its count
``TRIGger:SOURce`` / ``TRIGger:LEVel``  stored
``SINGle``                              one acquisition (complete when ``*OPC?`` answers)
``WAVeform:SOURce CHANnel<i>``          the input the next preamble and data refer to
``WAVeform:FORMat BYTE|WORD|ASCii``     unsigned 8 or 16 bit codes, or volts as text
``WAVeform:BYTeorder MSBFirst|LSBFirst``  byte order of WORD data
``WAVeform:STARt`` / ``WAVeform:STOP``  1-based first and last point of the next data request
``WAVeform:PREamble?``                  format, type, points, count, x_increment, x_origin,
                                        x_reference, y_increment, y_origin, y_reference
``WAVeform:DATA?``                      the requested points; more than :data:`MAX_PER_REQUEST`
                                        is -223 "Too much data" and an empty block
======================================  =========================================================

Unsigned codes carry a reference: WORD ``u = code + 32768`` (y_reference 32768), BYTE
``u = (code >> 8) + 128`` (y_reference 128, y_increment × 256), so
``volts = (u - y_reference) · y_increment + y_origin`` -- read as signed, or with the reference
left out, every sample would be off by half the range.  x_reference is the trigger's sample.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from drivers.scpi.blocks import format_block
from drivers.sim.adc import CODES_16
from drivers.sim.digitizer import Digitizer, parse_input
from drivers.sim.instrument import Call, Command, command
from drivers.sim.scpi_parser import (
    STANDARD_ERRORS,
    format_float,
    parse_choice,
    parse_int,
    parse_number,
    scpi_error,
)
from drivers.sim.switch import SCOPE_INPUTS

#: Most points one ``WAVeform:DATA?`` returns (invented for the simulator; real instruments have
#: their own limit, often far larger): long records must be fetched in chunks.
MAX_PER_REQUEST = 10_000
DIVISIONS_Y = 8
DIVISIONS_X = 10
FORMATS = ("BYTE", "WORD", "ASCii")


@dataclass(kw_only=True)
class WaveState:
    source: int = 1
    format: str = "BYTE"
    little_endian: bool = False
    start: int = 1
    stop: int = 1_000_000
    averaging: bool = False
    count: int = 2


class WaveformScope(Digitizer):
    """The scope role, spoken with a waveform subsystem."""

    model = "LTS-WS4"

    def reset(self) -> None:
        super().reset()
        self.wave = WaveState()

    def commands(self) -> Sequence[Command]:
        self.wave = WaveState()
        return [
            command("CHANnel#:SCALe", write=self._set_scale, query=lambda c: self._per_div(c)),
            command(
                "CHANnel#:OFFSet",
                write=lambda c: self._set_input(c, "offset_V", -10.0, 10.0),
                query=lambda c: self._get_input(c, "offset_V"),
            ),
            command(
                "ACQuire:POINts",
                write=lambda c: self._set_int("points", c, 2, 1_000_000),
                query=lambda c: str(self.settings.points),
            ),
            command(
                "TIMebase:SCALe",
                write=self._set_timebase,
                query=lambda c: format_float(self._time_per_div()),
            ),
            command(
                "TIMebase:REFerence",
                write=lambda c: self._set("pretrigger_s", c, -1e-3, 1e-3),
                query=lambda c: format_float(self.settings.pretrigger_s),
            ),
            command(
                "ACQuire:TYPE",
                write=self._set_type,
                query=lambda c: "AVER" if self.wave.averaging else "NORM",
            ),
            command("ACQuire:COUNt", write=self._set_count, query=lambda c: str(self.wave.count)),
            command(
                "TRIGger:SOURce",
                write=self._set_trigger_source,
                query=lambda c: self.settings.trigger_source,
            ),
            command(
                "TRIGger:LEVel",
                write=lambda c: self._set("trigger_level_V", c, -10.0, 10.0),
                query=lambda c: format_float(self.settings.trigger_level_V),
            ),
            command("SINGle", write=lambda c: self.acquire(), max_params=0),
            command(
                "WAVeform:SOURce", write=self._set_source, query=lambda c: f"CHAN{self.wave.source}"
            ),
            command(
                "WAVeform:FORMat",
                write=self._set_format_kind,
                query=lambda c: self.wave.format.upper()[:4],
            ),
            command(
                "WAVeform:BYTeorder",
                write=self._set_order,
                query=lambda c: "LSBF" if self.wave.little_endian else "MSBF",
            ),
            command(
                "WAVeform:STARt",
                write=lambda c: self._set_range(c, "start"),
                query=lambda c: str(self.wave.start),
            ),
            command(
                "WAVeform:STOP",
                write=lambda c: self._set_range(c, "stop"),
                query=lambda c: str(self.wave.stop),
            ),
            command("WAVeform:PREamble", query=lambda c: self._wave_preamble()),
            command("WAVeform:DATA", query=lambda c: self._wave_data()),
        ]

    # --- settings ------------------------------------------------------------------------------
    def _set_scale(self, call: Call) -> None:
        index = call.suffix(0, hi=SCOPE_INPUTS) - 1
        per_div = parse_number(call.arg(), lo=1e-3 / DIVISIONS_Y, hi=20.0 / DIVISIONS_Y)
        self.settings.full_scale_V[index] = per_div * DIVISIONS_Y

    def _per_div(self, call: Call) -> str:
        return format_float(self.settings.full_scale_V[call.suffix(0, hi=SCOPE_INPUTS) - 1] / 8)

    def _set_timebase(self, call: Call) -> None:
        per_div = parse_number(call.arg(), lo=1e-12, hi=1.0)
        rate = self.settings.points / (DIVISIONS_X * per_div)
        if not 1e3 <= rate <= 5e9:
            raise scpi_error(-222, f"sample rate {rate:g} Hz")
        self.settings.sample_rate_hz = rate

    def _time_per_div(self) -> float:
        return self.settings.points / self.settings.sample_rate_hz / DIVISIONS_X

    def _set_type(self, call: Call) -> None:
        self.wave.averaging = parse_choice(call.arg(), ("NORMal", "AVERage")) == "AVERage"
        self.settings.averages = self.wave.count if self.wave.averaging else 1

    def _set_count(self, call: Call) -> None:
        self.wave.count = parse_int(call.arg(), lo=2, hi=65536)
        self.settings.averages = self.wave.count if self.wave.averaging else 1

    def _set_source(self, call: Call) -> None:
        self.wave.source = parse_input(call.arg())

    def _set_format_kind(self, call: Call) -> None:
        self.wave.format = parse_choice(call.arg(), FORMATS)

    def _set_order(self, call: Call) -> None:
        choice = parse_choice(call.arg(), ("MSBFirst", "LSBFirst"))
        self.wave.little_endian = choice == "LSBFirst"

    def _set_range(self, call: Call, name: str) -> None:
        setattr(self.wave, name, parse_int(call.arg(), lo=1, hi=1_000_000))

    # --- read-out ------------------------------------------------------------------------------
    def _calibration(self) -> tuple[float, float, float, float, int, int]:
        """(x_increment, x_reference, y_increment, y_origin, points, averages) of the source."""
        index = self.wave.source - 1
        rec, s = self.record, self.settings
        if rec is None:
            dt_s, t0_s = 1.0 / s.sample_rate_hz, -s.pretrigger_s
            lsb, offset, points, averages = (
                s.full_scale_V[index] / CODES_16,
                s.offset_V[index],
                s.points,
                s.averages,
            )
        else:
            dt_s, t0_s = rec.dt_s, rec.t0_s
            lsb, offset, points, averages = (
                rec.lsb_V[index],
                rec.offset_V[index],
                rec.codes.shape[1],
                rec.averages,
            )
        return dt_s, -t0_s / dt_s, lsb, offset, points, averages

    def _wave_preamble(self) -> str:
        dx, x_ref, lsb, offset, points, averages = self._calibration()
        kind = self.wave.format
        if kind == "ASCii":
            y_inc, y_origin, y_ref, code = 1.0, 0.0, 0.0, 4
        elif kind == "WORD":
            y_inc, y_origin, y_ref, code = lsb, offset, 32768.0, 1
        else:
            y_inc, y_origin, y_ref, code = lsb * 256, offset, 128.0, 0
        values = [code, 1 if averages > 1 else 0, points, averages, dx, 0.0, x_ref,
                  y_inc, y_origin, y_ref]  # fmt: skip
        return ",".join(format_float(v) if isinstance(v, float) else str(v) for v in values)

    def _wave_data(self) -> bytes:
        rec = self.record
        if rec is None:
            self.push_error(-230, STANDARD_ERRORS[-230])
            return format_block(b"")
        index = self.wave.source - 1
        first = self.wave.start - 1
        last = min(self.wave.stop, rec.codes.shape[1])
        if last - first > MAX_PER_REQUEST:
            self.push_error(-223, "Too much data")
            return format_block(b"")
        codes = rec.codes[index, first:last].astype(np.int32)
        kind = self.wave.format
        if kind == "ASCii":
            volts = codes * rec.lsb_V[index] + rec.offset_V[index]
            return (",".join(f"{v:.9e}" for v in volts)).encode("ascii")
        if kind == "WORD":
            return format_block(
                codes + 32768, kind="uint16", big_endian=not self.wave.little_endian
            )
        return format_block((codes >> 8) + 128, kind="uint8")

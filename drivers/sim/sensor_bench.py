"""The simulated bench of a light sensor (or scintillator module): pulser (driving the LED), mca,
threshold DAC, counter, bias supply and temperature sensor, each a real SCPI server; a module (a
sensor file with a ``plate:``) adds the coincidence unit fed by cosmic-ray muons."""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from drivers.sim.bench import SimBench
from drivers.sim.bias import BiasSupply
from drivers.sim.board import BoardSpec, ChannelSpec, CoincidenceSpec
from drivers.sim.coincidence import CoincidenceUnit
from drivers.sim.cosmics import CosmicPlate
from drivers.sim.dark_counter import DarkCounter
from drivers.sim.instrument import SimInstrument
from drivers.sim.mca import PulseHeightAnalyser
from drivers.sim.pulser import Pulser
from drivers.sim.sensor import SensorSpec
from drivers.sim.sensor_rig import SensorRig
from drivers.sim.thermometer import Thermometer
from drivers.sim.threshold import ThresholdDac

#: The roles of a sensor bench, in port order.
SENSOR_ROLES = ("pulser", "mca", "threshold", "counter", "bias", "temperature", "coincidence")


def bias_board(spec: SensorSpec) -> BoardSpec:
    """What the simulated bias supply needs of the device it feeds: the leakage path, the seed and
    the faults (a sensor file has no preamp channels of its own)."""
    return BoardSpec(
        serial=spec.serial,
        channels=(ChannelSpec(),),
        board_type=spec.sensor_type,
        bias_resistance_Mohm=spec.bias_resistance_Mohm,
        seed=spec.seed,
        faults=spec.faults,
        source=spec.source,
    )


class SensorBench(SimBench):
    """A running simulated sensor bench (same servers, bench file and lifetime as ``SimBench``)."""

    def make_instruments(self, board: Any, clock: Callable[[], float]) -> dict[str, SimInstrument]:
        spec: SensorSpec = board

        def common(role: str) -> dict[str, Any]:
            ident = SENSOR_ROLES.index(role) + 1
            return {
                "instrument_id": ident,
                "serial": f"SIM{ident:02d}-{spec.serial}",
                "clock": clock,
            }

        pulser = Pulser(**common("pulser"))
        bias = BiasSupply(board=bias_board(spec), **common("bias"))
        rig = SensorRig(spec, bias=bias, pulser=pulser, clock=clock)
        threshold = ThresholdDac(channels=len(spec.sensors), **common("threshold"))
        extra: dict[str, SimInstrument] = {}
        sources = {}
        if spec.plate is not None:  # a scintillator module: two sensors in coincidence
            plate = CosmicPlate(rig, spec.plate)
            unit = CoincidenceUnit(
                spec=CoincidenceSpec(noise_mV=spec.readout.noise_mV),
                pulser=pulser,
                seed=spec.seed,
                time_scale=spec.time_scale,
                source=plate.trains,
                **common("coincidence"),
            )
            extra["coincidence"] = unit
            sources["COINcidence"] = plate.triggered(unit)
        instruments: dict[str, SimInstrument] = {
            "pulser": pulser,
            "mca": PulseHeightAnalyser(rig=rig, sources=sources, **common("mca")),
            "threshold": threshold,
            "counter": DarkCounter(rig=rig, threshold=threshold, **common("counter")),
            "bias": bias,
            "temperature": Thermometer(rig=rig, **common("temperature")),
            **extra,
        }
        if spec.time_scale < 1.0:  # the simulated clock runs faster than real time: say so
            for inst in instruments.values():
                inst.model = f"{inst.model}-FAST"
        return instruments

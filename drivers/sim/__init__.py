"""The simulated bench: a board model and seven SCPI instruments served over TCP on 127.0.0.1.

Imports only ``drivers.scpi.blocks``, ``drivers.errors`` and ``drivers.yamlsafe`` from the project
(never pyvisa).  See ``bench`` (start/serve), ``board`` (board file keys), ``response`` and
``physics`` (what the board does), ``digitizer``, ``counter``, ``bias``, ``coincidence`` (the instruments), ``faults``.
"""

from drivers.sim.bench import SimBench, serve, start_sim_bench
from drivers.sim.board import ROLES, BoardSpec, ChannelSpec, FaultSpec, PulseSpec, ShaperSpec
from drivers.sim.board_loader import board_from_mapping, load_board
from drivers.sim.files import load_sim_file
from drivers.sim.instrument import MAKER

__all__ = [
    "MAKER",
    "ROLES",
    "BoardSpec",
    "ChannelSpec",
    "FaultSpec",
    "PulseSpec",
    "ShaperSpec",
    "SimBench",
    "board_from_mapping",
    "load_board",
    "load_sim_file",
    "serve",
    "start_sim_bench",
]

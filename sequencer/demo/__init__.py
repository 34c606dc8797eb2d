"""The demo: invented batches (preamp boards, scintillator modules, trigger-chain modules)
qualified end to end on the simulator.

The scenario data (simulated board files and the batch file) are package data beside this module;
:func:`run_demo` qualifies the batch, writes the results database, the certificates and the batch
summary.  ``benchwright demo`` is its command.
"""

from .scenario import (
    DEMO_BATCH,
    DEMO_MODULE_BATCH,
    DEMO_TRIGGER_BATCH,
    DemoResult,
    demo_dir,
    run_demo,
)

__all__ = [
    "DEMO_BATCH",
    "DEMO_MODULE_BATCH",
    "DEMO_TRIGGER_BATCH",
    "DemoResult",
    "demo_dir",
    "run_demo",
]

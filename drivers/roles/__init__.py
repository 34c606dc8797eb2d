"""One driver per bench role, each over a :class:`drivers.scpi.session.ScpiSession` and a dialect."""

from drivers.roles.bias import BiasSupply
from drivers.roles.coincidence import CoincidenceCounts, CoincidenceUnit
from drivers.roles.counter import Counter
from drivers.roles.mca import Mca
from drivers.roles.pulser import Pulser
from drivers.roles.scope import Scope
from drivers.roles.switch import Switch
from drivers.roles.temperature import Thermometer
from drivers.roles.threshold import ThresholdDac

#: Role name (as in the bench file) -> driver class.
ROLE_CLASSES = {
    "pulser": Pulser,
    "scope": Scope,
    "threshold": ThresholdDac,
    "counter": Counter,
    "bias": BiasSupply,
    "switch": Switch,
    "coincidence": CoincidenceUnit,
    "mca": Mca,
    "temperature": Thermometer,
}

__all__ = [
    "ROLE_CLASSES",
    "BiasSupply",
    "CoincidenceCounts",
    "CoincidenceUnit",
    "Counter",
    "Mca",
    "Pulser",
    "Scope",
    "Switch",
    "Thermometer",
    "ThresholdDac",
]

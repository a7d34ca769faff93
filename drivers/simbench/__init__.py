"""The simulated bench: a virtual PLX-7 wafer, physics of its sites, probe error
boxes, noise, drift and faults, served as SCPI over TCP on 127.0.0.1."""

from probelog.drivers.simbench.bench import ErrorBoxes, SimBench
from probelog.drivers.simbench.faults import Fault, FaultSpecError, parse_fault

__all__ = ["SimBench", "ErrorBoxes", "Fault", "FaultSpecError", "parse_fault"]

"""edopt: energy-delay trade-off optimisation of CMOS gate sizes.

Results are first-order logical-effort estimates; confirm them with circuit simulation and the
foundry's own rules before sign-off.
"""

from .circuit import Circuit, chain
from .errors import (
    CaseError,
    CircuitError,
    EdoptError,
    GateError,
    InfeasibleTarget,
    SolverError,
)
from .formats.case import load_case
from .formats.verilog import read_verilog
from .frontier import Frontier, balanced, fastest_within, frontier
from .gates import GateType, builtin_library, explicit, from_expression
from .sizing import CAUTION, Sizer, Sizing, parse_target, size
from .structures import generate
from .technology import Technology, technology
from .voltage import OperatingPoint, operating_point, voltage_frontier

__all__ = [
    "CAUTION", "CaseError", "Circuit", "CircuitError", "EdoptError", "Frontier", "GateError",
    "GateType", "InfeasibleTarget", "Sizer", "Sizing", "SolverError", "Technology", "balanced",
    "builtin_library", "chain", "explicit", "fastest_within", "from_expression", "frontier",
    "load_case", "parse_target", "size", "technology", "OperatingPoint", "operating_point",
    "voltage_frontier", "read_verilog", "generate",
]
__version__ = "0.1.0"

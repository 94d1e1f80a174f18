"""Fault scenarios: named, parameterised, combinable disturbances applied before estimation.

A *case* is what one estimator run sees: the measured recording, the cell model the filter
believes in, and the initial SOC handed to the filter.  A :class:`Scenario` is an ordered
combination of :class:`Fault` objects; :func:`apply_scenario` returns a new case and never
touches the inputs.  The lab reference ``soc_ref`` is the truth and is never disturbed (rows
removed by ``rowdrop`` take their reference with them).

Spec syntax (our own)::

    [label:]fault[=value][+fault[=value]...]

    nominal                        no fault
    offset=0.05+soc0=-0.2          current offset of +0.05 A and a -20 point initial SOC error
    cold_sensor:toffset=2+gain     label "cold_sensor", +2 degC sensor offset, default gain error
    vnoise+seed=7                  default extra voltage noise with RNG seed 7

Fault names, units and defaults (the defaults are in the ranges that are common practice for
automotive BMS sensors and models -- common practice, no source):

============  ===========================================================  ====================
name          effect                                                       default
============  ===========================================================  ====================
soc0          initial SOC given to the filter = true SOC0 + value          -0.20 (20 points)
              (mirrored, i.e. true SOC0 - value, when the sum leaves 0..1)
offset        current-sensor offset added to the measured current, A       0.5 % of a 5C full
              (+ reads more discharge)                                      scale = 0.025 C
gain          current-sensor gain error: measured current x (1 + value)     0.01 (1 %)
vnoise        extra white Gaussian voltage noise, sigma in V               0.005 V
fade          capacity fade: the cell has (1 - value) of the filter's      0.15 (15 %)
              capacity; applied as filter capacity x 1/(1 - value)
toffset       temperature-sensor offset, degC (25 degC assumed when the     +2.0 degC
              recording has no temperature)
vdrop         fraction of voltage samples lost (NaN, the filter predicts)   0.05
rowdrop       fraction of rows removed (first and last row kept)           0.05
ocv_offset    offset of the filter's OCV table, V                          +0.010 V
ocv_scale     relative scale error of the filter's OCV table               +0.005 (0.5 %)
seed          RNG seed for vnoise / vdrop / rowdrop (not a fault)          0
============  ===========================================================  ====================

``fade`` uses an equivalence: a recording made on a cell that matches the model, filtered with a
model whose capacity is 1/(1 - fade) times larger, is the same as a faded cell (capacity
(1 - fade) Q) filtered with the nameplate capacity Q, up to the SOC scale of the reference.

Random draws use ``numpy.random.default_rng([seed, k])`` with ``k`` a fixed number per fault
name, so a scenario gives the same numbers in any order of its faults and on any worker.
"""
from __future__ import annotations

import math
import re
from dataclasses import dataclass, field
from typing import Iterable

import numpy as np

from socfuse.models.ocv import OcvCurve
from socfuse.models.recording import Recording
from socfuse.models.thevenin import CellModel
from socfuse.models.sensors import measure

__all__ = ["FaultError", "Fault", "Scenario", "Case", "FAULTS", "apply_scenario", "scenario_from_spec",
           "parse_scenarios", "DEFAULT_SCENARIOS", "fault_help", "true_initial_soc", "NOMINAL"]

NOMINAL = "nominal"

#: full-scale range assumed for a pack current sensor, in C-rate of the cell capacity (peak
#: drive currents of an e-bike / cargo-trike pack, common practice, no source).
FULL_SCALE_C = 5.0


class FaultError(ValueError):
    """A scenario spec or fault value that cannot be used; the message names the fault."""


@dataclass(frozen=True)
class _Kind:
    name: str
    unit: str
    default: float | None       # None: computed from the model (offset)
    default_text: str
    text: str
    stream: int                 # fixed RNG stream number


FAULTS: dict[str, _Kind] = {k.name: k for k in [
    _Kind("soc0", "fraction", -0.20, "-0.20 (20 points)",
          "initial SOC error: the filter gets true SOC0 + value (mirrored when outside 0..1)", 1),
    _Kind("offset", "A", None, f"0.5 % of a {FULL_SCALE_C:g}C full scale = 0.025 C",
          "current-sensor offset added to the measured current (+ reads more discharge)", 2),
    _Kind("gain", "-", 0.01, "0.01 (1 %)", "current-sensor gain error: measured current x (1 + value)", 3),
    _Kind("vnoise", "V", 0.005, "0.005 V", "extra white Gaussian voltage noise (sigma)", 4),
    _Kind("fade", "-", 0.15, "0.15 (15 %)",
          "capacity fade: the cell holds (1 - value) of the filter's capacity", 5),
    _Kind("toffset", "degC", 2.0, "+2.0 degC", "temperature-sensor offset", 6),
    _Kind("vdrop", "-", 0.05, "0.05 (5 %)", "fraction of voltage samples lost (NaN)", 7),
    _Kind("rowdrop", "-", 0.05, "0.05 (5 %)", "fraction of rows removed (first and last kept)", 8),
    _Kind("ocv_offset", "V", 0.010, "+0.010 V", "offset of the filter's OCV table", 9),
    _Kind("ocv_scale", "-", 0.005, "+0.005 (0.5 %)", "relative scale error of the filter's OCV table", 10),
]}


@dataclass(frozen=True)
class Fault:
    """One fault: a name from :data:`FAULTS` and its value (``None`` = the default)."""

    name: str
    value: float | None = None

    def __post_init__(self) -> None:
        if self.name not in FAULTS:
            raise FaultError(f"unknown fault {self.name!r}; known: {', '.join(FAULTS)}")
        if self.value is not None:
            v = float(self.value)
            if not math.isfinite(v):
                raise FaultError(f"fault {self.name}: value must be finite, got {self.value!r}")
            lim = {"fade": (0.0, 0.9), "vdrop": (0.0, 0.9), "rowdrop": (0.0, 0.9), "vnoise": (0.0, 1.0),
                   "soc0": (-1.0, 1.0), "gain": (-0.5, 0.5), "ocv_scale": (-0.5, 0.5)}.get(self.name)
            if lim and not (lim[0] <= v <= lim[1]):
                raise FaultError(f"fault {self.name}: value {v:g} outside {lim[0]:g}..{lim[1]:g}")
            object.__setattr__(self, "value", v)

    def resolved(self, model: CellModel) -> float:
        """The value in SI units (the default filled in for ``model``)."""
        if self.value is not None:
            return self.value
        if self.name == "offset":
            return 0.005 * FULL_SCALE_C * model.capacity_ah
        return float(FAULTS[self.name].default)

    def label(self) -> str:
        return self.name if self.value is None else f"{self.name}={self.value:g}"


@dataclass(frozen=True)
class Scenario:
    """An ordered combination of faults with a label and an RNG seed.

    Parameters
    ----------
    name : str
        Label used in tables and reports.
    faults : tuple of Fault
        Applied in order (order only matters between ``gain`` and ``offset``: measured =
        (1 + gain) * i + offset when written ``gain+offset``).
    seed : int
        Seed of the random draws (``vnoise``, ``vdrop``, ``rowdrop``).
    """

    name: str
    faults: tuple = ()
    seed: int = 0

    def __post_init__(self) -> None:
        object.__setattr__(self, "faults", tuple(self.faults))
        names = [f.name for f in self.faults]
        dup = sorted({n for n in names if names.count(n) > 1})
        if dup:
            raise FaultError(f"scenario {self.name!r}: fault(s) given twice: {', '.join(dup)}")

    @property
    def spec(self) -> str:
        """Canonical spec string (parsable by :func:`scenario_from_spec`)."""
        body = "+".join(f.label() for f in self.faults) or NOMINAL
        if self.seed:
            body += f"+seed={self.seed}"
        return body

    def describe(self, model: CellModel | None = None) -> str:
        """Human-readable description with the values in SI units."""
        if not self.faults:
            return "no fault"
        parts = []
        for f in self.faults:
            k = FAULTS[f.name]
            v = f.resolved(model) if model is not None else f.value
            val = k.default_text if v is None else f"{v:g} {k.unit}".rstrip(" -")
            parts.append(f"{k.text}: {val}")
        return "; ".join(parts)

    def get(self, name: str) -> Fault | None:
        for f in self.faults:
            if f.name == name:
                return f
        return None


@dataclass(frozen=True, eq=False)
class Case:
    """What one estimator run sees.

    Parameters
    ----------
    recording : Recording
        Measured data (``soc_ref``, when present, is the truth).
    model : CellModel
        The model the filter uses.
    soc0 : float or None
        Initial SOC given to the filter (``None``: the filter starts from the OCV of the first
        voltage sample).
    notes : tuple of str
        What was done to the case.
    """

    recording: Recording
    model: CellModel
    soc0: float | None = None
    notes: tuple = field(default_factory=tuple)


def true_initial_soc(case: Case) -> float:
    """The true SOC at the first sample: ``soc_ref[0]``, else the case's ``soc0``, else the
    OCV inverse of the first voltage (the cell is assumed rested at the start).

    Parameters
    ----------
    case : Case

    Returns
    -------
    float
        True initial SOC, fraction 0..1.
    """
    rec = case.recording
    if rec.soc_ref is not None and math.isfinite(rec.soc_ref[0]):
        return float(rec.soc_ref[0])
    if case.soc0 is not None:
        return float(case.soc0)
    t0 = None if rec.temperature_c is None else float(rec.temperature_c[0])
    return float(np.clip(case.model.ocv.soc_at(float(rec.voltage_v[0]), t0), 0.0, 1.0))


def _rng(seed: int, name: str) -> np.random.Generator:
    return np.random.default_rng([int(seed) & 0xFFFFFFFF, FAULTS[name].stream])


def _ocv_with(ocv: OcvCurve, offset_v: float = 0.0, scale: float = 0.0, what: str = "") -> OcvCurve:
    table = ocv.ocv_v if ocv.temperature_c is not None else ocv.ocv_v[0]
    src = (ocv.source + "; " if ocv.source else "") + what
    return OcvCurve(ocv.soc, np.asarray(table) * (1.0 + scale) + offset_v, ocv.temperature_c, src)


def apply_scenario(case: Case, scenario: Scenario) -> Case:
    """Apply each fault of ``scenario`` to ``case`` and return the new case.

    Each fault changes exactly one thing: ``soc0`` the filter's initial SOC; ``offset`` and
    ``gain`` the measured current; ``vnoise`` and ``vdrop`` the measured voltage; ``toffset``
    the measured temperature; ``rowdrop`` removes rows; ``fade`` the filter model's capacity;
    ``ocv_offset`` and ``ocv_scale`` the filter model's OCV table.

    Parameters
    ----------
    case : Case
        The fault-free run: recording (s, A, V, degC), filter model and initial SOC.
    scenario : Scenario
        The faults and the random seed.

    Returns
    -------
    Case
        The faulted recording (metadata ``scenario`` and ``faults`` set), the faulted model, the
        initial SOC given to the filter (fraction) and one note per fault.
    """
    rec = case.recording
    model = case.model
    soc0 = case.soc0
    notes = list(case.notes)
    cur = np.array(rec.current_a)
    volt = np.array(rec.voltage_v)
    temp = None if rec.temperature_c is None else np.array(rec.temperature_c)
    keep = None
    for f in scenario.faults:
        v = f.resolved(model)
        if f.name == "soc0":
            z = true_initial_soc(case)
            z1 = z + v
            if not (0.0 <= z1 <= 1.0):
                z1 = z - v
            soc0 = float(np.clip(z1, 0.0, 1.0))
            notes.append(f"initial SOC given to the filter {soc0:.3f} (true {z:.3f})")
        elif f.name == "offset":
            cur = measure(cur, offset=v)
            notes.append(f"current offset {v:+.4g} A")
        elif f.name == "gain":
            cur = measure(cur, gain_error=v)
            notes.append(f"current gain error {v:+.3%}")
        elif f.name == "vnoise":
            volt = measure(volt, noise_sigma=v, rng=_rng(scenario.seed, "vnoise"))
            notes.append(f"extra voltage noise sigma {v * 1e3:.3g} mV")
        elif f.name == "vdrop":
            lost = _rng(scenario.seed, "vdrop").random(volt.size) < v
            lost[0] = False
            volt = np.where(lost, np.nan, volt)
            notes.append(f"{int(lost.sum())} voltage samples lost")
        elif f.name == "rowdrop":
            k = _rng(scenario.seed, "rowdrop").random(volt.size) >= v
            k[0] = k[-1] = True
            keep = k if keep is None else keep & k
            notes.append(f"{int((~k).sum())} rows removed")
        elif f.name == "toffset":
            base = np.full(rec.n, 25.0) if temp is None else temp
            temp = base + v
            notes.append(f"temperature offset {v:+.3g} degC")
        elif f.name == "fade":
            model = model.with_(capacity_ah=model.capacity_ah / (1.0 - v))
            notes.append(f"capacity fade {v:.1%} (filter capacity {model.capacity_ah:.4g} Ah)")
        elif f.name == "ocv_offset":
            model = model.with_(ocv=_ocv_with(model.ocv, offset_v=v, what=f"fault ocv_offset {v:+g} V"))
            notes.append(f"OCV table offset {v * 1e3:+.3g} mV")
        elif f.name == "ocv_scale":
            model = model.with_(ocv=_ocv_with(model.ocv, scale=v, what=f"fault ocv_scale {v:+g}"))
            notes.append(f"OCV table scale {v:+.3%}")
    meta = dict(rec.metadata)
    meta["scenario"] = scenario.name
    meta["faults"] = scenario.spec
    new = Recording(rec.time_s, cur, volt, temp, rec.soc_ref, rec.name, meta)
    if keep is not None:
        idx = np.flatnonzero(keep)
        opt = lambda a: None if a is None else a[idx]  # noqa: E731
        new = Recording(new.time_s[idx], new.current_a[idx], new.voltage_v[idx], opt(new.temperature_c),
                        opt(new.soc_ref), new.name, meta)
    return Case(new, model, soc0, tuple(notes))


_NAME_RE = re.compile(r"^[A-Za-z0-9_.-]+$")


def scenario_from_spec(spec: str) -> Scenario:
    """Parse ``[label:]fault[=value][+fault[=value]...]`` (see the module docstring).

    ``nominal`` (or an empty body) is the fault-free scenario.  Without a label the canonical
    spec is the name.  Values are plain numbers in the unit of the fault.

    Parameters
    ----------
    spec : str
        The scenario text, e.g. ``"hot:toffset=5+offset=0.05"``.

    Returns
    -------
    Scenario

    Raises
    ------
    FaultError
        For a bad label, an empty or unknown fault, a non-numeric value or a bad seed.
    """
    s = str(spec).strip()
    label = None
    if ":" in s:
        label, s = (p.strip() for p in s.split(":", 1))
        if not label or not _NAME_RE.match(label):
            raise FaultError(f"scenario {spec!r}: bad label {label!r} (letters, digits, _ . - only)")
    faults = []
    seed = 0
    if s and s.lower() not in (NOMINAL, "none"):
        for part in s.split("+"):
            part = part.strip()
            if not part:
                raise FaultError(f"scenario {spec!r}: empty fault between '+' signs")
            name, eq, val = part.partition("=")
            name = name.strip().lower()
            value = None
            if eq:
                try:
                    value = float(val)
                except ValueError:
                    raise FaultError(f"scenario {spec!r}: fault {name}: {val!r} is not a number") from None
            if name == "seed":
                if value is None or value != int(value) or value < 0:
                    raise FaultError(f"scenario {spec!r}: seed needs a non-negative integer")
                seed = int(value)
                continue
            if name not in FAULTS:
                raise FaultError(f"scenario {spec!r}: unknown fault {name!r}; known: {', '.join(FAULTS)}, seed")
            faults.append(Fault(name, value))
    sc = Scenario("", tuple(faults), seed)
    return Scenario(label or sc.spec, sc.faults, seed)


def parse_scenarios(specs: Iterable[str] | str) -> list[Scenario]:
    """Several specs (a list, or one string separated by commas or whitespace); names unique.

    Parameters
    ----------
    specs : str or iterable of str
        Scenario specs (see :func:`scenario_from_spec`).

    Returns
    -------
    list of Scenario
        In the order given.

    Raises
    ------
    FaultError
        For a bad spec or a name given twice.
    """
    if isinstance(specs, str):
        specs = [specs]
    out = []
    for item in specs:
        for s in re.split(r"[,\s]+", str(item).strip()):
            if s:
                out.append(scenario_from_spec(s))
    names = [s.name for s in out]
    dup = sorted({n for n in names if names.count(n) > 1})
    if dup:
        raise FaultError(f"scenario name(s) given twice: {', '.join(dup)}")
    return out


#: The benchmark's default set: the fault-free case, each single fault at its default, and one
#: combination (a worn pack with a cheap current sensor and a wrong start).
DEFAULT_SCENARIOS = (
    "nominal", "soc0", "offset", "gain", "vnoise", "fade", "toffset", "vdrop", "ocv_offset",
    "combined:soc0+offset+gain+vnoise+fade",
)


def fault_help() -> str:
    """One paragraph for ``--help`` listing every fault and its default.

    Parameters
    ----------
    None

    Returns
    -------
    str
        The spec grammar and each fault's unit, default and meaning.
    """
    items = [f"{k.name} ({k.unit}, default {k.default_text}): {k.text}" for k in FAULTS.values()]
    return ("Scenario spec: [label:]fault[=value][+fault...]; 'nominal' = no fault. Faults: "
            + "; ".join(items) + "; seed=N sets the RNG seed. Defaults are common practice for "
            "automotive BMS sensors, no source.")

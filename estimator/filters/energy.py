"""Energy-based SOC (SOC_E), remaining energy at rest and at a load, pack scaling.

Capacity-based SOC ``z`` (SOC_C) counts charge; the energy a cell can still give at rest is

    E(z, T) = Q * integral_0^z OCV(s, T) ds          (Wh when Q is in Ah and OCV in V)

and the energy-based SOC is ``SOC_E = E(z, T) / E(1, T)``.  Because the OCV is higher when
the cell is full, the upper half of the charge holds more energy than the lower half, so on
an increasing OCV curve ``SOC_E <= SOC_C`` (equality at 0 and 1).

Exactness: the OCV curve of :class:`models.ocv.OcvCurve` is a PCHIP interpolant per
temperature row (Fritsch and Carlson, SIAM J. Numer. Anal. 17, 1980; :mod:`models.pchip`, the
``scipy`` implementation's arithmetic without importing scipy)
that continues linearly outside its breakpoints, and rows are mixed linearly in temperature.
The integral of each row is therefore taken in closed form: the antiderivative of the very
same piecewise cubic (``pchip(soc, ocv_v[r]).antiderivative()``, rebuilt from the
curve's own breakpoints, so it is the identical interpolant) plus the exact integral of the
linear end pieces; the temperature mix of the integrals is the integral of the temperature mix.
SOC arguments outside [0, 1] are clipped to [0, 1].

Speed: build an :class:`EnergyTable` once with :func:`energy_table` and call its methods on
whole arrays (one ``searchsorted`` per temperature row).  The module-level functions
(:func:`soc_c_to_e`, :func:`soc_e_to_c`, :func:`remaining_energy_wh`, :func:`rest_energy_wh`)
reuse one table per model object through a ``weakref.WeakKeyDictionary`` (an entry lives only
as long as its immutable model), and the exact row integrals, the costly part, per OCV curve
through a bounded cache keyed by the curve's content (a digest of its breakpoints and values, not
the object's identity): models that differ only in capacity (a Monte Carlo study, a batch of
cells with capacity scales) share one curve integral, and the cache can never change a result.

Energy at a load (:func:`usable_energy`): the model is discharged from a given state at a
constant current or a constant power until the *terminal* voltage reaches ``model.v_min_v``
or the SOC reaches 0 (the model's empty point; its OCV below SOC 0 is an extrapolation), by
simulating the model under the sampling rule of DEVELOPERS.md (exact zero-order hold for the
RC pairs, so a constant current is integrated without discretisation error in the RC
dynamics) with :func:`models.identify.fastsim.simulate_fast`, the vectorised form of
:func:`models.thevenin.simulate` that equals it to rounding.  Constant power is solved by a
fixed-point iteration on the current profile, ``i_k = P / v_k``, each pass a full simulation.  This is
better than a steady-state (``R0 + sum R_j``) shortcut when an RC time constant is not small
next to the runtime.  At zero load the result is the rest energy.

Pack scaling (:class:`PackConfig`, :func:`parse_pack`): ``NsMp`` = N cells in series, M in
parallel, all alike: series multiplies voltage, parallel multiplies capacity and current, so
energy and power scale by ``N * M`` and the runtime is that of one cell at ``I / M`` or
``P / (N M)``.
"""
from __future__ import annotations

import hashlib
import re
import weakref
from collections import OrderedDict
from dataclasses import dataclass, replace

import numpy as np

from socfuse.models.tables import as_axis, clamp_weights
from socfuse.models.thevenin import SECONDS_PER_HOUR, CellModel

__all__ = [
    "EnergyError", "EnergyTable", "energy_table", "soc_c_to_e", "soc_e_to_c", "rest_energy_wh",
    "remaining_energy_wh", "PackConfig", "parse_pack", "UsableEnergy", "usable_energy",
]

DEFAULT_TEMPERATURE_C = 25.0  # the same default as models.ocv.OcvCurve


class EnergyError(ValueError):
    """Bad input to an energy computation (bad pack string, negative load, ...)."""


# --------------------------------------------------------------------------- rest energy
@dataclass(frozen=True, eq=False)
class _RowIntegral:
    """Exact integral from 0 of one OCV row (PCHIP inside, linear outside the breakpoints)."""

    f: object     # models.pchip PCHIP of the row (the curve's own interpolant)
    anti: object  # its antiderivative (models.pchip.PiecewisePolynomial)
    lo: float
    hi: float
    f_lo: float
    f_hi: float
    d_lo: float
    d_hi: float
    anti_lo: float
    span: float   # integral from lo to hi
    a0: float     # signed integral from lo to 0

    @classmethod
    def build(cls, soc: np.ndarray, ocv_v: np.ndarray) -> "_RowIntegral":
        from socfuse.models.pchip import pchip

        f = pchip(soc, ocv_v)
        anti = f.antiderivative()
        lo, hi = float(soc[0]), float(soc[-1])
        anti_lo = float(anti(lo))
        row = cls(f, anti, lo, hi, float(f(lo)), float(f(hi)), float(f(lo, 1)), float(f(hi, 1)),
                  anti_lo, float(anti(hi)) - anti_lo, 0.0)
        object.__setattr__(row, "a0", float(row._from_lo(np.array(0.0))))
        return row

    def _from_lo(self, z: np.ndarray) -> np.ndarray:
        """Signed integral of the row from ``lo`` to ``z`` (any real z)."""
        out = self.anti(np.clip(z, self.lo, self.hi)) - self.anti_lo
        below = z - self.lo
        out = np.where(z < self.lo, self.f_lo * below + 0.5 * self.d_lo * below * below, out)
        above = z - self.hi
        out = np.where(z > self.hi, self.span + self.f_hi * above + 0.5 * self.d_hi * above * above, out)
        return out

    def integral(self, z: np.ndarray) -> np.ndarray:
        """Integral of the row from 0 to ``z`` (V per unit SOC)."""
        return self._from_lo(z) - self.a0

    def value(self, z: np.ndarray) -> np.ndarray:
        """OCV of the row at ``z`` (V), linear beyond the breakpoints as in OcvCurve."""
        out = self.f(np.clip(z, self.lo, self.hi))
        out = np.where(z < self.lo, self.f_lo + self.d_lo * (z - self.lo), out)
        return np.where(z > self.hi, self.f_hi + self.d_hi * (z - self.hi), out)


@dataclass(frozen=True, eq=False)
class EnergyTable:
    """Exact rest-energy integral of one OCV curve, reusable on arrays.

    Build with :func:`energy_table` (from a :class:`~models.thevenin.CellModel`) or
    :meth:`from_points` (from raw breakpoints, monotonicity not required).

    Attributes
    ----------
    capacity_ah : float
        Usable capacity Q (Ah).
    temperature_c : ndarray (n_t,) or None
        Temperature breakpoints of the OCV rows (degC); ``None`` for one row.
    default_temperature_c : float
        Temperature used when a method is called without one (degC).
    rows : tuple
        One exact row integral per OCV temperature row.
    """

    capacity_ah: float
    temperature_c: np.ndarray | None
    default_temperature_c: float
    rows: tuple

    @classmethod
    def from_points(cls, soc, ocv_v, capacity_ah: float, temperature_c=None,
                    default_temperature_c: float | None = None) -> "EnergyTable":
        """Table for OCV breakpoints ``soc`` (n,) and ``ocv_v`` (n,) or (n_t, n).

        Unlike :class:`~models.ocv.OcvCurve` the rows need not be strictly increasing (a
        constant curve is allowed here, for checks), but they must be finite and positive.
        """
        soc = as_axis(soc, "OCV soc breakpoints")
        ocv = np.array(ocv_v, dtype=float)
        if ocv.ndim == 1:
            ocv = ocv[None, :]
        if ocv.ndim != 2 or ocv.shape[1] != soc.size or soc.size < 2:
            raise EnergyError(f"OCV table shape {np.shape(ocv_v)} does not match {soc.size} SOC breakpoints "
                              "(at least 2 needed)")
        if not np.all(np.isfinite(ocv)) or np.any(ocv <= 0):
            r, c = np.argwhere(~(np.isfinite(ocv) & (ocv > 0)))[0]
            raise EnergyError(f"OCV must be finite and positive for an energy integral: row {r}, "
                              f"breakpoint {c} is {ocv[r, c]}")
        if not (np.isfinite(capacity_ah) and capacity_ah > 0):
            raise EnergyError(f"capacity_ah must be positive and finite, got {capacity_ah}")
        temp = None if temperature_c is None else as_axis(temperature_c, "OCV temperature breakpoints")
        if (temp is None and ocv.shape[0] != 1) or (temp is not None and temp.size != ocv.shape[0]):
            raise EnergyError(f"OCV table has {ocv.shape[0]} rows but "
                              f"{0 if temp is None else temp.size} temperature breakpoints")
        rows = tuple(_RowIntegral.build(soc, ocv[r]) for r in range(ocv.shape[0]))
        for r, row in enumerate(rows):
            # the extrapolated ends could in principle dip to 0 V inside [0, 1]
            for z in (0.0, 1.0):
                v = row.f_lo + row.d_lo * (z - row.lo) if z < row.lo else (
                    row.f_hi + row.d_hi * (z - row.hi) if z > row.hi else 1.0)
                if v <= 0:
                    raise EnergyError(f"OCV row {r} extrapolates to {v:.4f} V at SOC {z}; "
                                      "the energy integral needs a positive OCV on [0, 1]")
        if temp is not None:
            temp.setflags(write=False)
        t_def = DEFAULT_TEMPERATURE_C if default_temperature_c is None else float(default_temperature_c)
        return cls(float(capacity_ah), temp, t_def, rows)

    # ---------------------------------------------------------------- evaluation
    def _mix(self, soc, temperature_c, with_ocv: bool = False):
        """Integral from 0 to clip(soc, 0, 1) of OCV(., T) (V per unit SOC), its value at 1,
        and (optionally) OCV at the clipped soc; arrays broadcast with ``temperature_c``."""
        z = np.clip(np.asarray(soc, dtype=float), 0.0, 1.0)
        one = np.array(1.0)
        if self.temperature_c is None or len(self.rows) == 1:
            r = self.rows[0]
            t = np.asarray(0.0 if temperature_c is None else temperature_c, dtype=float)
            z = np.broadcast_to(z, np.broadcast_shapes(z.shape, t.shape))
            full = np.full(z.shape, float(r.integral(one)))
            return r.integral(z), full, (r.value(z) if with_ocv else None)
        t = np.asarray(self.default_temperature_c if temperature_c is None else temperature_c, dtype=float)
        i0, w = clamp_weights(self.temperature_c, t)
        z, i0, w = np.broadcast_arrays(z, i0, w)
        part = np.empty(z.shape)
        full = np.empty(z.shape)
        ocv = np.empty(z.shape) if with_ocv else None
        for r in range(len(self.rows) - 1):
            m = i0 == r
            if np.any(m):
                a, b = self.rows[r], self.rows[r + 1]
                wm, zm = w[m], z[m]
                part[m] = (1.0 - wm) * a.integral(zm) + wm * b.integral(zm)
                full[m] = (1.0 - wm) * a.integral(one) + wm * b.integral(one)
                if with_ocv:
                    ocv[m] = (1.0 - wm) * a.value(zm) + wm * b.value(zm)
        return part, full, ocv

    @staticmethod
    def _out(a):
        return a[()] if np.ndim(a) == 0 else a

    def energy_wh(self, soc, temperature_c=None):
        """Rest energy from ``soc`` down to SOC 0, Wh: ``Q * integral_0^soc OCV``. Arrays broadcast."""
        part, _, _ = self._mix(soc, temperature_c)
        return self._out(self.capacity_ah * part)

    def full_energy_wh(self, temperature_c=None):
        """Rest energy of a full cell (SOC 1 to 0), Wh."""
        return self.energy_wh(1.0, temperature_c)

    def soc_e(self, soc, temperature_c=None):
        """Energy-based SOC (fraction) at capacity-based SOC ``soc`` (clipped to [0, 1])."""
        part, full, _ = self._mix(soc, temperature_c)
        return self._out(part / full)

    def soc_c(self, soc_e, temperature_c=None, tol: float = 1e-14, max_iter: int = 60):
        """Capacity-based SOC whose energy-based SOC is ``soc_e`` (clipped to [0, 1]).

        Bracketed Newton iteration on ``soc_e(z) - target`` with the exact derivative
        ``OCV(z) / integral_0^1 OCV``; a step that leaves the bracket is replaced by bisection.
        Vectorised; a few steps reach ``tol``.
        """
        target = np.clip(np.asarray(soc_e, dtype=float), 0.0, 1.0)
        t = np.asarray(self.default_temperature_c if temperature_c is None else temperature_c, dtype=float)
        target, t = np.broadcast_arrays(target, t)
        lo = np.zeros(target.shape)
        hi = np.ones(target.shape)
        z = np.array(target, dtype=float)
        for _ in range(max_iter):
            part, full, ocv = self._mix(z, t, with_ocv=True)
            g = part / full - target
            lo = np.where(g <= 0, z, lo)
            hi = np.where(g >= 0, z, hi)
            newton = z - g * full / ocv
            z_new = np.where((newton >= lo) & (newton <= hi), newton, 0.5 * (lo + hi))
            z_new = np.where(g == 0, z, z_new)
            converged = np.all(np.abs(z_new - z) <= tol)
            z = z_new
            if converged:
                break
        return self._out(z)


_TABLES: "weakref.WeakKeyDictionary[CellModel, EnergyTable]" = weakref.WeakKeyDictionary()
_CURVES: "OrderedDict[bytes, EnergyTable]" = OrderedDict()   # by OCV curve content, least recently used first
CURVE_CACHE_SIZE = 32


def _curve_key(ocv) -> bytes:
    """Digest of an OCV curve's content (breakpoints, values, temperatures)."""
    h = hashlib.blake2b(digest_size=20)
    for a in (ocv.soc, ocv.ocv_v, ocv.temperature_c):
        if a is None:
            h.update(b"none")
        else:
            a = np.ascontiguousarray(a, dtype=float)
            h.update(repr(a.shape).encode())
            h.update(a.tobytes())
    return h.digest()


def energy_table(model: CellModel, temperature_c: float | None = None) -> EnergyTable:
    """Exact rest-energy table of ``model`` (all its OCV temperature rows).

    Parameters
    ----------
    model : CellModel
    temperature_c : float, optional
        Default temperature (degC) for calls on the table that give none (default 25).

    Returns
    -------
    EnergyTable
        Closed-form integrals of the OCV over SOC per temperature row, for ``capacity_ah`` (Ah).

    Raises
    ------
    EnergyError
        When the model's capacity is not positive and finite.

    References
    ----------
    F. N. Fritsch and R. E. Carlson, "Monotone piecewise cubic interpolation", SIAM J. Numer. Anal.
    17 (1980) (the PCHIP interpolant whose antiderivative is used; as cited in the module docstring).
    """
    if temperature_c is None:
        tab = _TABLES.get(model)
        if tab is not None:
            return tab
    ocv = model.ocv
    key = _curve_key(ocv)
    base = _CURVES.get(key)
    if base is None:
        base = EnergyTable.from_points(ocv.soc, ocv.ocv_v, model.capacity_ah, ocv.temperature_c)
        _CURVES[key] = base
        while len(_CURVES) > CURVE_CACHE_SIZE:
            _CURVES.popitem(last=False)
    else:
        _CURVES.move_to_end(key)
    cap = model.capacity_ah
    if not (np.isfinite(cap) and cap > 0):
        raise EnergyError(f"capacity_ah must be positive and finite, got {cap}")
    t_def = DEFAULT_TEMPERATURE_C if temperature_c is None else float(temperature_c)
    tab = base if (base.capacity_ah == float(cap) and base.default_temperature_c == t_def) else replace(
        base, capacity_ah=float(cap), default_temperature_c=t_def)
    if temperature_c is None:
        _TABLES[model] = tab
    return tab


def _simulate_fast(*args, **kwargs):
    from socfuse.models.identify.fastsim import simulate_fast  # here: the estimate path need not import it

    return simulate_fast(*args, **kwargs)


def soc_c_to_e(model: CellModel, soc, temperature_c=None):
    """Energy-based SOC (fraction) at capacity-based SOC ``soc`` (fraction, clipped to [0, 1]).

    Vectorised over ``soc`` and ``temperature_c`` (degC, default 25), which broadcast.

    Parameters
    ----------
    model : CellModel
    soc : float or array_like
        Capacity-based SOC, fraction.
    temperature_c : float or array_like, optional
        Temperature, degC (default 25).

    Returns
    -------
    float or numpy.ndarray
        Energy-based SOC, fraction 0..1, shape of the broadcast inputs.
    """
    return energy_table(model).soc_e(soc, temperature_c)


def soc_e_to_c(model: CellModel, soc_e, temperature_c=None):
    """Capacity-based SOC at energy-based SOC ``soc_e``; inverse of :func:`soc_c_to_e`.

    Parameters
    ----------
    model : CellModel
    soc_e : float or array_like
        Energy-based SOC, fraction.
    temperature_c : float or array_like, optional
        Temperature, degC (default 25).

    Returns
    -------
    float or numpy.ndarray
        Capacity-based SOC, fraction 0..1, shape of the broadcast inputs.
    """
    return energy_table(model).soc_c(soc_e, temperature_c)


def remaining_energy_wh(model: CellModel, soc, temperature_c=None):
    """Energy (Wh) one cell still gives at rest from ``soc`` down to SOC 0 (vectorised).

    Parameters
    ----------
    model : CellModel
    soc : float or array_like
        SOC, fraction.
    temperature_c : float or array_like, optional
        Temperature, degC (default 25).

    Returns
    -------
    float or numpy.ndarray
        Energy to SOC 0 at rest (integral of the OCV over charge), Wh per cell.
    """
    return energy_table(model).energy_wh(soc, temperature_c)


def rest_energy_wh(model: CellModel, soc=1.0, temperature_c=None):
    """Rest energy (Wh) of one cell from ``soc`` (default full) down to SOC 0.

    Parameters
    ----------
    model : CellModel
    soc : float or array_like
        Start SOC, fraction (default 1, full).
    temperature_c : float or array_like, optional
        Temperature, degC (default 25).

    Returns
    -------
    float or numpy.ndarray
        Energy, Wh per cell.
    """
    return remaining_energy_wh(model, soc, temperature_c)


# --------------------------------------------------------------------------- pack
_PACK_RE = re.compile(r"^\s*(\d+)\s*s\s*(\d+)\s*p\s*$", re.IGNORECASE)


@dataclass(frozen=True)
class PackConfig:
    """``n_series`` cells in series times ``n_parallel`` in parallel, all alike."""

    n_series: int = 1
    n_parallel: int = 1

    def __post_init__(self) -> None:
        for name in ("n_series", "n_parallel"):
            v = getattr(self, name)
            if not isinstance(v, (int, np.integer)) or isinstance(v, bool) or v < 1:
                raise EnergyError(f"pack {name} must be a whole number >= 1, got {v!r}")

    @property
    def n_cells(self) -> int:
        return int(self.n_series * self.n_parallel)

    @property
    def label(self) -> str:
        return f"{self.n_series}s{self.n_parallel}p"


def parse_pack(text: str | None) -> PackConfig:
    """Parse ``"14s4p"`` (case-insensitive; ``None`` or ``""`` = one cell, ``1s1p``).

    Parameters
    ----------
    text : str or None
        Pack layout ``NsMp`` (N cells in series, M in parallel).

    Returns
    -------
    PackConfig
        ``(n_series, n_parallel)``.

    Raises
    ------
    EnergyError
        When ``text`` is not of the form ``NsMp``.
    """
    if text is None or str(text).strip() == "":
        return PackConfig(1, 1)
    m = _PACK_RE.match(str(text))
    if not m:
        raise EnergyError(f"pack {text!r} is not of the form NsMp (N cells in series, M in parallel), "
                          "for example 14s4p")
    return PackConfig(int(m.group(1)), int(m.group(2)))


# --------------------------------------------------------------------------- energy at a load
@dataclass(frozen=True)
class UsableEnergy:
    """Energy deliverable from a state down to cut-off at a constant load.

    All energies, voltages and loads refer to ``pack`` (one cell when ``1s1p``).

    Attributes
    ----------
    energy_wh : float
        Energy delivered at the terminals until cut-off, Wh.
    rest_energy_wh : float
        Energy at rest from the same SOC down to SOC 0, Wh (upper bound of ``energy_wh``).
    runtime_s : float
        Time to cut-off at this load, s (``inf`` at zero load).
    cutoff_soc : float
        Capacity-based SOC when the cut-off arrives (fraction).
    cutoff_reason : str
        ``"voltage"`` (terminal voltage reached ``v_min``), ``"empty"`` (SOC 0 reached first)
        or ``"rest"`` (zero load).
    current_a, power_w : float
        The load: ``current_a`` for a constant-current load (``nan`` otherwise), ``power_w``
        for a constant-power load (``nan`` otherwise).
    mean_current_a, mean_voltage_v : float
        Means over the discharge (``nan`` at zero load).
    soc0 : float
        Starting SOC (fraction).
    temperature_c : float
    pack : PackConfig
    """

    energy_wh: float
    rest_energy_wh: float
    runtime_s: float
    cutoff_soc: float
    cutoff_reason: str
    current_a: float
    power_w: float
    mean_current_a: float
    mean_voltage_v: float
    soc0: float
    temperature_c: float
    pack: PackConfig

    @property
    def soc_e_at_cutoff(self) -> float:
        """Fraction of the rest energy left in the cell at cut-off (unusable at this load)."""
        return 1.0 - self.energy_wh / self.rest_energy_wh if self.rest_energy_wh > 0 else 0.0


def _first_crossing(v: np.ndarray, soc: np.ndarray, v_min: float):
    """Index k and fraction f in [0, 1] of the first crossing of v <= v_min or soc <= 0."""
    bad = (v <= v_min) | (soc <= 0.0)
    if not np.any(bad):
        return None
    k1 = int(np.argmax(bad))
    if k1 == 0:
        return 0, 0.0, "voltage" if v[0] <= v_min else "empty"
    k = k1 - 1
    fv = (v[k] - v_min) / (v[k] - v[k1]) if v[k1] <= v_min else np.inf
    fs = soc[k] / (soc[k] - soc[k1]) if soc[k1] <= 0.0 else np.inf
    if fv <= fs:
        return k, float(fv), "voltage"
    return k, float(fs), "empty"


def _under_peak(model: CellModel, sim, current_a: np.ndarray, temp: float, peak_a: float | None,
                duration_s: float) -> np.ndarray:
    """Terminal voltage at each sample, lowered by the step response to a current peak (if any)."""
    if peak_a is None:
        return sim.voltage_v
    z = sim.soc
    r = np.asarray(model.r0_ohm.at(z, temp), dtype=float)
    for pair in model.rc:
        tau = np.asarray(pair.tau_s.at(z, temp), dtype=float)
        r = r + np.asarray(pair.r_ohm.at(z, temp), dtype=float) * (1.0 - np.exp(-duration_s / tau))
    return sim.voltage_v - np.maximum(peak_a - current_a, 0.0) * r


def usable_energy(model: CellModel, *, current_a: float | None = None, power_w: float | None = None,
                  soc0: float = 1.0, temperature_c: float | None = None, v_rc0=None,
                  pack: PackConfig | str | None = None, peak_current_a: float | None = None,
                  peak_duration_s: float = 10.0, n_steps: int = 2000,
                  max_iter: int = 30) -> UsableEnergy:
    """Energy deliverable from ``soc0`` down to cut-off at a constant current or power.

    Parameters
    ----------
    model : CellModel
        Cell model; ``v_min_v`` is the cut-off on the terminal voltage.
    current_a : float, optional
        Constant discharge current at the pack terminals, A (>= 0). Give this or ``power_w``.
    power_w : float, optional
        Constant discharge power at the pack terminals, W (>= 0).
    soc0 : float
        Starting capacity-based SOC (fraction, 0..1).
    temperature_c : float, optional
        Cell temperature, degC (default 25).
    v_rc0 : array_like (n_rc,), optional
        Starting RC voltages of one cell, V (default 0: a rested cell).
    pack : PackConfig or str, optional
        Pack configuration (``"14s4p"``); default one cell.
    peak_current_a : float, optional
        A current peak (A, at the pack terminals) the load may draw at any moment: the discharge
        then ends when the voltage *under that peak* would reach ``v_min_v``.  The peak is a
        step from the running current lasting ``peak_duration_s``; its extra drop is the exact
        step response ``(I_peak - i) * (R0 + sum_j R_j (1 - exp(-d / tau_j)))`` (first-order RC
        step response) at the running SOC.  Real loads are peaky and their cut-off arrives at
        a peak, so this bounds the usable energy more honestly than the mean load alone.
    peak_duration_s : float
        Length of that peak, s (default 10 s, the HPPC discharge pulse of the US DOE/INL manuals).
    n_steps : int
        Simulation steps over the longest possible runtime (sets SOC resolution, about
        ``soc0 / n_steps``).
    max_iter : int
        Fixed-point passes for constant power.

    Returns
    -------
    UsableEnergy

    Notes
    -----
    The discharge is simulated with :func:`models.identify.fastsim.simulate_fast` (equal to
    :func:`models.thevenin.simulate` to rounding; exact ZOH RC dynamics,
    resistances at the running SOC and temperature), the energy is the trapezoid of
    ``v * i`` over the samples and the cut-off time is interpolated linearly inside the last
    interval.  The discharge ends at the first of ``v <= v_min_v`` or ``SOC <= 0``.
    Hysteresis, when the model has it, starts at 0.
    """
    pk = pack if isinstance(pack, PackConfig) else parse_pack(pack)
    if (current_a is None) == (power_w is None):
        raise EnergyError("give exactly one of current_a (A) or power_w (W)")
    load = float(current_a if current_a is not None else power_w)
    if not np.isfinite(load) or load < 0:
        raise EnergyError(f"load must be a finite discharge value >= 0, got {load}")
    if not (0.0 <= soc0 <= 1.0):
        raise EnergyError(f"soc0 must lie in [0, 1], got {soc0}")
    temp = DEFAULT_TEMPERATURE_C if temperature_c is None else float(temperature_c)
    if peak_current_a is not None and not (np.isfinite(peak_current_a) and peak_current_a >= 0
                                           and np.isfinite(peak_duration_s) and peak_duration_s > 0):
        raise EnergyError(f"peak_current_a must be >= 0 and peak_duration_s > 0, got {peak_current_a} A, "
                          f"{peak_duration_s} s")
    n_cells = pk.n_cells
    e_rest_cell = float(remaining_energy_wh(model, soc0, temp))
    nan = float("nan")
    is_power = power_w is not None
    common = dict(current_a=nan if is_power else load, power_w=load if is_power else nan, soc0=float(soc0),
                  temperature_c=temp, pack=pk, rest_energy_wh=e_rest_cell * n_cells)
    if load == 0.0 or soc0 == 0.0:
        return UsableEnergy(energy_wh=e_rest_cell * n_cells, runtime_s=np.inf if load == 0 else 0.0,
                            cutoff_soc=0.0 if load == 0 else float(soc0),
                            cutoff_reason="rest" if load == 0 else "empty",
                            mean_current_a=nan, mean_voltage_v=nan, **common)
    q_as = model.capacity_ah * SECONDS_PER_HOUR
    peak_cell = None if peak_current_a is None else float(peak_current_a) / pk.n_parallel
    if is_power:
        p_cell = load / n_cells
        # runtime <= rest energy / power, since the loaded voltage is below the OCV
        t_end = 1.02 * e_rest_cell * SECONDS_PER_HOUR / p_cell
    else:
        i_cell = load / pk.n_parallel
        t_end = 1.0005 * soc0 * q_as / i_cell
    time_s = np.linspace(0.0, t_end, int(n_steps) + 1)
    if is_power:
        # first guess: current at the OCV along a coulomb count at P / OCV(soc0)
        i_prof = np.full(time_s.shape, p_cell / float(model.ocv.voltage(soc0, temp)))
        for _ in range(int(max_iter)):
            sim = _simulate_fast(model, time_s, i_prof, temp, soc0=soc0, v_rc0=v_rc0)
            cross = _first_crossing(_under_peak(model, sim, i_prof, temp, peak_cell, peak_duration_s),
                                    sim.soc, model.v_min_v)
            last = sim.voltage_v.size if cross is None else cross[0] + 2
            v = np.maximum(sim.voltage_v, 0.2 * model.v_min_v)
            new = p_cell / v
            # beyond the cut-off the profile is irrelevant: hold the last current
            if last < new.size:
                new[last:] = new[last - 1]
            done = np.max(np.abs(new[:last] - i_prof[:last])) <= 1e-10 * np.max(new[:last])
            i_prof = new
            if done:
                break
        else:
            raise EnergyError(f"constant-power discharge at {p_cell:.4g} W per cell did not converge; "
                              "the load may exceed the cell's maximum power")
    else:
        i_prof = np.full(time_s.shape, i_cell)
    sim = _simulate_fast(model, time_s, i_prof, temp, soc0=soc0, v_rc0=v_rc0)
    v, soc = sim.voltage_v, sim.soc
    cross = _first_crossing(_under_peak(model, sim, i_prof, temp, peak_cell, peak_duration_s), soc, model.v_min_v)
    if cross is None:  # pragma: no cover - t_end covers SOC 0 by construction
        raise EnergyError("discharge did not reach cut-off within the simulated time")
    k, f, reason = cross
    p = v * i_prof
    dt = np.diff(time_s)
    e_ws = float(np.sum(0.5 * (p[:k] + p[1:k + 1]) * dt[:k])) if k > 0 else 0.0
    if k < dt.size:
        p_end = p[k] + f * (p[k + 1] - p[k])
        e_ws += 0.5 * (p[k] + p_end) * f * dt[k]
        t_cut = time_s[k] + f * dt[k]
        soc_cut = soc[k] + f * (soc[k + 1] - soc[k])
    else:  # pragma: no cover
        t_cut, soc_cut = time_s[k], soc[k]
    if t_cut > 0:
        u = 0.5 * (i_prof[:-1] + i_prof[1:])
        charge = float(np.sum(u[:k] * dt[:k])) + (u[k] * f * dt[k] if k < dt.size else 0.0)
        mean_i = charge / t_cut
        mean_v = e_ws / charge if charge > 0 else nan
    else:
        mean_i = mean_v = nan
    return UsableEnergy(energy_wh=float(e_ws / SECONDS_PER_HOUR * n_cells), runtime_s=float(t_cut),
                        cutoff_soc=float(max(soc_cut, 0.0)), cutoff_reason=reason,
                        mean_current_a=float(mean_i * pk.n_parallel), mean_voltage_v=float(mean_v * pk.n_series), **common)

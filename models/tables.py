"""Parameter tables over SOC (and optionally temperature) with linear interpolation."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["ParamTable", "as_axis", "clamp_weights"]


def as_axis(values, what: str) -> np.ndarray:
    """Return a strictly increasing, finite float64 1-D copy of ``values`` or raise ValueError.

    Parameters
    ----------
    values : array_like
        Axis values in the axis's unit (flattened).
    what : str
        Name of the axis in the error message.

    Returns
    -------
    numpy.ndarray, shape (n,)
        float64 copy.

    Raises
    ------
    ValueError
        When empty, non-finite or not strictly increasing (naming the position).
    """
    a = np.array(values, dtype=float).ravel()
    if a.size == 0:
        raise ValueError(f"{what}: empty")
    if not np.all(np.isfinite(a)):
        raise ValueError(f"{what}: non-finite value at position {int(np.argmax(~np.isfinite(a)))}")
    d = np.diff(a)
    if np.any(d <= 0):
        k = int(np.argmax(d <= 0))
        raise ValueError(f"{what}: not strictly increasing at position {k + 1} ({a[k]} then {a[k + 1]})")
    return a


def clamp_weights(axis: np.ndarray, x):
    """Lower index and weight for linear interpolation on ``axis``, clamped at both ends.

    Returns ``(i0, w)`` such that the interpolated value is ``(1-w)*y[i0] + w*y[i0+1]``.
    A single-point axis gives ``i0 = 0, w = 0`` (and callers must not read ``y[1]``).

    Parameters
    ----------
    axis : numpy.ndarray, shape (n,)
        Strictly increasing axis (see :func:`as_axis`).
    x : array_like
        Query points in the axis's unit; clamped to ``[axis[0], axis[-1]]``.

    Returns
    -------
    i0 : numpy.ndarray of int, same shape as ``x``
        Lower index, in ``0 .. n-2`` (0 for a single-point axis).
    w : numpy.ndarray, same shape as ``x``
        Weight of ``y[i0 + 1]``, in 0..1.
    """
    x = np.asarray(x, dtype=float)
    if axis.size == 1:
        return np.zeros(x.shape, dtype=int), np.zeros(x.shape)
    xc = np.clip(x, axis[0], axis[-1])
    i0 = np.clip(np.searchsorted(axis, xc, side="right") - 1, 0, axis.size - 2)
    w = (xc - axis[i0]) / (axis[i0 + 1] - axis[i0])
    return i0, w


@dataclass(frozen=True, eq=False)
class ParamTable:
    """A positive model parameter tabulated over SOC, optionally x temperature.

    Interpolation is linear and clamped at the ends (a resistance is never extrapolated to a
    negative value).

    Parameters
    ----------
    soc : ndarray, shape (n_s,)
        Strictly increasing SOC breakpoints (fraction 0..1).
    values : ndarray, shape (n_s,) or (n_t, n_s)
        Parameter values (unit given by the owner: ohm for resistances, s for time constants).
    temperature_c : ndarray, shape (n_t,), optional
        Strictly increasing temperature breakpoints (degC) for 2-D ``values``.
    name : str
        Used in error messages (for example ``"r0_ohm"``).
    """

    soc: np.ndarray
    values: np.ndarray
    temperature_c: np.ndarray | None = None
    name: str = "parameter"

    def __post_init__(self) -> None:
        soc = as_axis(self.soc, f"{self.name}: SOC breakpoints")
        v = np.array(self.values, dtype=float)
        if v.ndim == 0:
            v = np.full((1, soc.size), float(v))
        if v.ndim == 1:
            v = v[None, :]
        if v.ndim != 2 or v.shape[1] != soc.size:
            raise ValueError(f"{self.name}: values shape {np.shape(self.values)} does not match "
                             f"{soc.size} SOC breakpoints")
        if self.temperature_c is None:
            if v.shape[0] != 1:
                raise ValueError(f"{self.name}: 2-D values need temperature_c breakpoints")
            temp = None
        else:
            temp = as_axis(self.temperature_c, f"{self.name}: temperature breakpoints")
            if temp.size != v.shape[0]:
                raise ValueError(f"{self.name}: {v.shape[0]} rows of values but {temp.size} temperatures")
        if not np.all(np.isfinite(v)):
            r, c = np.argwhere(~np.isfinite(v))[0]
            raise ValueError(f"{self.name}: non-finite value at temperature row {r}, SOC breakpoint {c}")
        if np.any(v <= 0):
            r, c = np.argwhere(v <= 0)[0]
            raise ValueError(f"{self.name}: must be positive, got {v[r, c]} at temperature row {r}, "
                             f"SOC breakpoint {c} (SOC {soc[c]})")
        soc.setflags(write=False)
        v.setflags(write=False)
        object.__setattr__(self, "soc", soc)
        object.__setattr__(self, "values", v)
        object.__setattr__(self, "temperature_c", temp)

    @classmethod
    def constant(cls, value: float, name: str = "parameter") -> "ParamTable":
        """A table that is ``value`` everywhere."""
        return cls(np.array([0.0, 1.0]), np.array([value, value], dtype=float), None, name)

    def at(self, soc, temperature_c=None):
        """Interpolated value at ``soc`` (fraction) and ``temperature_c`` (degC, default 25)."""
        s = np.asarray(soc, dtype=float)
        rows = [np.interp(s, self.soc, self.values[r]) for r in range(self.values.shape[0])]
        if self.temperature_c is None or len(rows) == 1:
            out = rows[0]
        else:
            t = np.asarray(25.0 if temperature_c is None else temperature_c, dtype=float)
            i0, w = clamp_weights(self.temperature_c, t)
            stack = np.stack(np.broadcast_arrays(*rows))
            i0, w = np.broadcast_arrays(i0, w)
            shape = np.broadcast_shapes(stack.shape[1:], i0.shape)
            stack = np.broadcast_to(stack, (stack.shape[0],) + shape)
            i0 = np.broadcast_to(i0, shape)
            w = np.broadcast_to(w, shape)
            lo = np.take_along_axis(stack, i0[None], 0)[0]
            hi = np.take_along_axis(stack, (i0 + 1)[None], 0)[0]
            out = (1.0 - w) * lo + w * hi
        return out[()] if np.ndim(out) == 0 else out

    def uniform(self, soc_grid, temp_grid) -> np.ndarray:
        """Tabulate on the given grids; returns shape (len(temp_grid), len(soc_grid))."""
        return np.stack([self.at(soc_grid, t) for t in np.asarray(temp_grid, dtype=float)])

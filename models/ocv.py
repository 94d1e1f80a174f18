"""Open-circuit-voltage curve OCV(SOC), optionally per temperature.

The curve is a monotone piecewise-cubic Hermite interpolant (PCHIP; Fritsch and Carlson,
SIAM J. Numer. Anal. 17, 1980) through the breakpoints, computed by :mod:`models.pchip`, which
gives the very doubles of ``scipy.interpolate.PchipInterpolator`` without importing scipy.
Outside the breakpoint range it continues linearly with the end slope, so an estimator that strays slightly below 0 or above 1 still sees a sensible,
observable voltage.  With several temperatures the curves are interpolated linearly in
temperature (clamped at the ends of the temperature range).
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from socfuse.models.pchip import pchip
from socfuse.models.tables import as_axis, clamp_weights

__all__ = ["OcvCurve"]


@dataclass(frozen=True, eq=False)
class OcvCurve:
    """OCV as a function of SOC (fraction 0..1), optionally of temperature.

    Parameters
    ----------
    soc : ndarray, shape (n,)
        Strictly increasing SOC breakpoints (fraction).
    ocv_v : ndarray, shape (n,) or (n_t, n)
        OCV in volts at each breakpoint; one row per temperature when 2-D.  Each row must be
        strictly increasing in SOC (a non-monotone curve is refused, never sorted).
    temperature_c : ndarray, shape (n_t,), optional
        Strictly increasing temperatures (degC) of the rows of ``ocv_v``.
    source : str
        Free text saying where the curve came from.
    """

    soc: np.ndarray
    ocv_v: np.ndarray
    temperature_c: np.ndarray | None = None
    source: str = ""
    _interp: tuple = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        soc = as_axis(self.soc, "OCV soc breakpoints")
        ocv = np.array(self.ocv_v, dtype=float)
        if ocv.ndim == 1:
            ocv = ocv[None, :]
        if ocv.ndim != 2 or ocv.shape[1] != soc.size:
            raise ValueError(
                f"OCV table shape {np.shape(self.ocv_v)} does not match {soc.size} SOC breakpoints")
        if not np.all(np.isfinite(ocv)):
            bad = np.argwhere(~np.isfinite(ocv))[0]
            raise ValueError(f"OCV table has a non-finite value at row {bad[0]}, breakpoint {bad[1]}")
        if self.temperature_c is None:
            if ocv.shape[0] != 1:
                raise ValueError("a 2-D OCV table needs temperature_c breakpoints")
            temp = None
        else:
            temp = as_axis(self.temperature_c, "OCV temperature breakpoints")
            if temp.size != ocv.shape[0]:
                raise ValueError(
                    f"OCV table has {ocv.shape[0]} rows but {temp.size} temperature breakpoints")
        for row in range(ocv.shape[0]):
            d = np.diff(ocv[row])
            if np.any(d <= 0):
                k = int(np.argmax(d <= 0))
                raise ValueError(
                    "OCV curve is not strictly increasing in SOC "
                    f"(row {row}: {ocv[row, k]:.6f} V at SOC {soc[k]:.4f} then "
                    f"{ocv[row, k + 1]:.6f} V at SOC {soc[k + 1]:.4f}); fix the table, it is not sorted for you")
        soc.setflags(write=False)
        ocv.setflags(write=False)
        object.__setattr__(self, "soc", soc)
        object.__setattr__(self, "ocv_v", ocv)
        object.__setattr__(self, "temperature_c", temp)
        object.__setattr__(self, "_interp", tuple(pchip(soc, ocv[r]) for r in range(ocv.shape[0])))

    # ------------------------------------------------------------------ evaluation
    @property
    def n_temperatures(self) -> int:
        return self.ocv_v.shape[0]

    def _rows(self, temperature_c):
        """Row indices and weights for temperature interpolation (arrays broadcast to T)."""
        if self.temperature_c is None or self.n_temperatures == 1:
            return None
        t = np.asarray(25.0 if temperature_c is None else temperature_c, dtype=float)
        return clamp_weights(self.temperature_c, t)

    def _eval_row(self, r: int, soc: np.ndarray, nu: int) -> np.ndarray:
        f = self._interp[r]
        lo, hi = self.soc[0], self.soc[-1]
        s = np.clip(soc, lo, hi)
        if nu == 0:
            out = f(s)
            d_lo, d_hi = f(lo, 1), f(hi, 1)
            out = np.where(soc < lo, f(lo) + d_lo * (soc - lo), out)
            out = np.where(soc > hi, f(hi) + d_hi * (soc - hi), out)
            return out
        out = f(s, 1)
        out = np.where(soc < lo, f(lo, 1), out)
        out = np.where(soc > hi, f(hi, 1), out)
        return out

    def _eval(self, soc, temperature_c, nu: int):
        soc_a = np.asarray(soc, dtype=float)
        rows = self._rows(temperature_c)
        if rows is None:
            out = self._eval_row(0, soc_a, nu)
        else:
            i0, w = rows
            i0, w, soc_b = np.broadcast_arrays(i0, w, soc_a)
            out = np.empty(soc_b.shape)
            for r in range(self.n_temperatures - 1):
                m = i0 == r
                if np.any(m):
                    lo = self._eval_row(r, soc_b[m], nu)
                    hi = self._eval_row(r + 1, soc_b[m], nu)
                    out[m] = (1.0 - w[m]) * lo + w[m] * hi
        return out[()] if np.ndim(out) == 0 else out

    def voltage(self, soc, temperature_c=None):
        """OCV in volts at ``soc`` (fraction) and ``temperature_c`` (degC, default 25)."""
        return self._eval(soc, temperature_c, 0)

    def slope(self, soc, temperature_c=None):
        """dOCV/dSOC in volts per unit SOC (fraction), same arguments as :meth:`voltage`."""
        return self._eval(soc, temperature_c, 1)

    def soc_at(self, ocv_v, temperature_c=None):
        """Inverse curve: the SOC whose OCV is ``ocv_v`` (clipped to the breakpoint range).

        Dense tabulation (4001 points) followed by two Newton steps on the interpolant, so the
        result matches ``voltage`` to well below a microvolt inside the range.
        """
        v = np.asarray(ocv_v, dtype=float)
        t = 25.0 if temperature_c is None else temperature_c
        v, t = np.broadcast_arrays(v, np.asarray(t, dtype=float))
        grid = np.linspace(self.soc[0], self.soc[-1], 4001)
        out = np.empty(v.shape)
        for tv in np.unique(t):
            m = t == tv
            table = self.voltage(grid, tv)
            z = np.interp(v[m], table, grid)
            for _ in range(2):
                z = z - (self.voltage(z, tv) - v[m]) / np.maximum(self.slope(z, tv), 1e-9)
                z = np.clip(z, self.soc[0], self.soc[-1])
            out[m] = z
        return out[()] if out.ndim == 0 else out

    def uniform(self, n_soc: int = 401, temperatures_c=None):
        """Tabulate on a uniform SOC grid over [0, 1] for the compiled kernels.

        Parameters
        ----------
        n_soc : int
            Number of grid points over SOC 0..1.
        temperatures_c : array_like, optional
            Uniform temperature grid (degC).  Default: the curve's own temperatures when they
            are uniformly spaced, else 25 degC only.

        Returns
        -------
        soc_grid : ndarray (n_soc,)
        temp_grid : ndarray (n_t,)
        ocv : ndarray (n_t, n_soc)
        docv : ndarray (n_t, n_soc)   dOCV/dSOC, V per unit SOC
        """
        soc_grid = np.linspace(0.0, 1.0, int(n_soc))
        if temperatures_c is None:
            temperatures_c = [25.0] if self.temperature_c is None else self.temperature_c
        temp_grid = np.asarray(temperatures_c, dtype=float).ravel()
        ocv = np.stack([self.voltage(soc_grid, t) for t in temp_grid])
        docv = np.stack([self.slope(soc_grid, t) for t in temp_grid])
        return soc_grid, temp_grid, ocv, docv

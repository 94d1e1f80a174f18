"""Monotone piecewise-cubic Hermite interpolation (PCHIP) in plain numpy, without scipy.

The OCV curve (:class:`models.ocv.OcvCurve`) and its exact energy integral
(``estimator.filters.energy``) use the PCHIP interpolant of Fritsch and Carlson (SIAM J. Numer.
Anal. 17, 1980) with the one-sided three-point end slopes of Moler (Numerical Computing with
MATLAB, 2004, section 3.6).  This module computes it, its derivative and its antiderivative
operation for operation as ``scipy.interpolate.PchipInterpolator`` (scipy 1.17: ``_cubic.py``
for the slopes and coefficients, ``PPoly.antiderivative`` and the compiled ``_ppoly.evaluate``
/ ``fix_continuity`` for the polynomial pieces), so every value is the same double, bit for bit
(``tests/test_pchip.py`` checks it against scipy).  Why not scipy itself: importing
``scipy.interpolate`` takes about 0.4 s, a third of a warm ``socfuse estimate``.

Evaluation follows the compiled scipy routine: the interval ``i`` with ``x[i] <= v < x[i+1]``
(the last interval for ``v == x[-1]``, the end intervals beyond the ends: the pieces are
extrapolated), ``s = v - x[i]``, and the sum ``((0 + c[k-1]) + c[k-2] s) + c[k-3] s^2 ...``
with the powers of ``s`` built by repeated multiplication; a NaN argument gives NaN.
"""
from __future__ import annotations

import numpy as np

__all__ = ["PiecewisePolynomial", "pchip"]


class PiecewisePolynomial:
    """A piecewise polynomial in the local coordinate ``s = v - x[i]`` of each interval.

    Parameters
    ----------
    c : ndarray, shape (k, n - 1)
        Coefficients, highest power first (``c[0]`` multiplies ``s**(k-1)``), one column per
        interval.
    x : ndarray, shape (n,)
        Strictly increasing breakpoints.
    """

    __slots__ = ("c", "x")

    def __init__(self, c: np.ndarray, x: np.ndarray) -> None:
        self.c = np.ascontiguousarray(c, dtype=float)
        self.x = np.ascontiguousarray(x, dtype=float)

    def __call__(self, v, nu: int = 0) -> np.ndarray:
        """Value (``nu = 0``) or first derivative (``nu = 1``) at ``v``.

        Parameters
        ----------
        v : array_like
            Arguments, in the unit of the breakpoints; outside them the end pieces continue.
        nu : int
            Derivative order, 0 or 1.

        Returns
        -------
        ndarray
            Same shape as ``v`` (a 0-d array for a scalar, as scipy returns).
        """
        if nu not in (0, 1):
            raise ValueError(f"derivative order {nu} not supported (0 or 1)")
        v = np.asarray(v, dtype=float)
        flat = v.ravel()
        i = np.clip(np.searchsorted(self.x, flat, side="right") - 1, 0, self.x.size - 2)
        s = flat - self.x[i]
        k = self.c.shape[0]
        res = np.zeros(flat.shape)
        z = np.ones(flat.shape)
        for kp in range(nu, k):
            prefactor = 1.0
            for m in range(kp, kp - nu, -1):
                prefactor *= m
            res = res + self.c[k - kp - 1, i] * z * prefactor
            if kp < k - 1:
                z = z * s
        return res.reshape(v.shape)

    def antiderivative(self) -> "PiecewisePolynomial":
        """The antiderivative that is 0 at ``x[0]`` and continuous at every breakpoint.

        Returns
        -------
        PiecewisePolynomial
            One degree higher (``PPoly.antiderivative(1)`` of scipy, same coefficients).
        """
        k, n_int = self.c.shape
        c = np.zeros((k + 1, n_int))
        c[:-1] = self.c
        c[:-1] /= np.arange(k, 0, -1, dtype=float)[:, None]
        for ip in range(1, n_int):             # continuity: each constant is the previous piece's end
            s = self.x[ip] - self.x[ip - 1]
            res, z = 0.0, 1.0
            for kp in range(k + 1):
                res = res + c[k - kp, ip - 1] * z
                if kp < k:
                    z *= s
            c[k, ip] = res
        return PiecewisePolynomial(c, self.x)


def _edge_slope(h0, h1, m0, m1):
    """One-sided three-point end slope, set to 0 or 3 m0 to keep the shape (Moler 2004)."""
    d = ((2 * h0 + h1) * m0 - h0 * m1) / (h0 + h1)
    if np.sign(d) != np.sign(m0):
        return 0.0
    if np.sign(m0) != np.sign(m1) and abs(d) > 3.0 * abs(m0):
        return 3.0 * m0
    return d


def pchip(x, y) -> PiecewisePolynomial:
    """The PCHIP interpolant through ``(x, y)`` as a cubic :class:`PiecewisePolynomial`.

    Parameters
    ----------
    x : array_like, shape (n,)
        Strictly increasing breakpoints, n >= 2 (the caller checks; see ``models.tables.as_axis``).
    y : array_like, shape (n,)
        Values at the breakpoints.

    Returns
    -------
    PiecewisePolynomial
        Coefficients shape (4, n - 1), equal to ``scipy.interpolate.PchipInterpolator(x, y).c``.
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    if x.ndim != 1 or y.shape != x.shape or x.size < 2:
        raise ValueError(f"pchip needs two 1-D arrays of the same length >= 2, got {x.shape} and {y.shape}")
    hk = x[1:] - x[:-1]
    if not np.all(hk > 0):
        raise ValueError("pchip breakpoints must be strictly increasing")
    mk = (y[1:] - y[:-1]) / hk
    dk = np.zeros_like(y)
    if y.size == 2:
        dk[:] = mk[0]
    else:
        smk = np.sign(mk)
        condition = (smk[1:] != smk[:-1]) | (mk[1:] == 0) | (mk[:-1] == 0)
        w1 = 2 * hk[1:] + hk[:-1]
        w2 = hk[1:] + 2 * hk[:-1]
        with np.errstate(divide="ignore", invalid="ignore"):
            whmean = (w1 / mk[:-1] + w2 / mk[1:]) / (w1 + w2)
        dk[1:-1][~condition] = 1.0 / whmean[~condition]
        dk[0] = _edge_slope(hk[0], hk[1], mk[0], mk[1])
        dk[-1] = _edge_slope(hk[-1], hk[-2], mk[-1], mk[-2])
    dx = np.diff(x)
    slope = np.diff(y) / dx
    t = (dk[:-1] + dk[1:] - 2 * slope) / dx
    c = np.stack((t / dx, (slope - dk[:-1]) / dx - t, dk[:-1], y[:-1]))
    return PiecewisePolynomial(c, x)

"""KernelTables: a cell model resampled on a uniform SOC grid x its own temperature breakpoints.

The compiled kernels (and the C export) look parameters up by index arithmetic on the uniform
SOC grid (``i = floor(soc / dsoc)``, ``w = soc / dsoc - i``) and bilinearly in temperature on
the axis of every temperature breakpoint the model has (non-uniform; a short search, which the
filter loop caches while the temperature is unchanged), so a table identified at 0.56 degC is
reproduced exactly at 0.56 degC.  All tables are packed in one array ``packed`` of shape
``(5 + 2 n_rc, n_t, n_s)`` with rows ``ocv, docv, r0, dr0, r_rc_1..n, tau_rc_1..n`` and a last
row that carries the temperature axis (degC, the same value along SOC), so the kernels take one
table argument; the named attributes are views of it.  A model with a charge-transfer term
(:class:`models.thevenin.ChargeTransfer`) has three more rows before the temperature axis,
``ct_b`` (V), ``ct_g`` (1/A), ``ct_r`` (ohm), constant along SOC: shape ``(8 + 2 n_rc, n_t, n_s)``.
The row count's parity tells the two apart (odd: none, even: with the term;
:func:`estimator.filters.kernels.tab_n_rc`), so a model without it gives the same array as before.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from socfuse.models.thevenin import SECONDS_PER_HOUR

__all__ = ["KernelTables", "ROW_OCV", "ROW_DOCV", "ROW_R0", "ROW_DR0", "ROW_RC"]

ROW_OCV, ROW_DOCV, ROW_R0, ROW_DR0, ROW_RC = 0, 1, 2, 3, 4
_MAX_T = 64


def _temperature_grid(model) -> np.ndarray:
    """Every temperature breakpoint of the model's tables (sorted, duplicates within 1e-9 degC merged).

    The union over the OCV, R0 and RC tables.  A model without a temperature axis has one row: at
    its identified temperature (:attr:`models.thevenin.CellModel.identified_temperature_c`, the
    pulse test's) when it records one, else at 25 degC.
    """
    pts = []
    ct = getattr(model, "charge_transfer", None)
    for a in (model.ocv.temperature_c, model.r0_ohm.temperature_c,
              *[p.r_ohm.temperature_c for p in model.rc], *[p.tau_s.temperature_c for p in model.rc],
              None if ct is None else ct.temperature_c):
        if a is not None and len(a) > 1:
            pts.extend(np.asarray(a, dtype=float).tolist())
    if not pts:
        t0 = getattr(model, "identified_temperature_c", None)
        return np.array([25.0 if t0 is None else float(t0)])
    u = np.unique(np.round(pts, 9))
    if u.size > _MAX_T:
        raise ValueError(f"the model has {u.size} distinct temperature breakpoints; the kernel tables take at "
                         f"most {_MAX_T}")
    return u.astype(float)


@dataclass(frozen=True, eq=False)
class KernelTables:
    """The model on a uniform SOC grid x the model's temperature breakpoints.

    Attributes
    ----------
    soc_grid : ndarray (n_s,)  uniform over [0, 1]
    temp_grid : ndarray (n_t,)  every temperature breakpoint of the model, increasing, degC (a single
        row at the identified temperature for a single-temperature model, at 25 degC for a model
        with no temperature information)
    packed : ndarray (5 + 2 n_rc, n_t, n_s)   the table rows and, last, the temperature axis
    ocv, docv : ndarray (n_t, n_s)   OCV (V) and dOCV/dSOC (V per unit SOC, the PCHIP derivative)
    r0, dr0 : ndarray (n_t, n_s)     R0 (ohm) and dR0/dSOC (ohm per unit SOC, central differences)
    r_rc, tau_rc : ndarray (n_rc, n_t, n_s)   RC resistances (ohm) and time constants (s)
    capacity_as : float              capacity in ampere-seconds
    eta_charge : float               coulombic efficiency applied to charge
    hyst_gamma, hyst_max_v : float   hysteresis rate and magnitude (0 without hysteresis)
    has_charge_transfer : bool       the rows ``ct_b, ct_g, ct_r`` exist (:attr:`row_ct`)
    """

    soc_grid: np.ndarray
    temp_grid: np.ndarray
    packed: np.ndarray
    n_rc: int
    capacity_as: float
    eta_charge: float
    has_hysteresis: bool
    hyst_gamma: float
    hyst_max_v: float
    has_charge_transfer: bool = False

    @classmethod
    def from_model(cls, model, n_soc: int = 401) -> "KernelTables":
        """Resample ``model`` (a :class:`models.CellModel`) on ``n_soc`` uniform SOC points."""
        n_soc = int(n_soc)
        if n_soc < 3:
            raise ValueError(f"n_soc must be at least 3, got {n_soc}")
        temp = _temperature_grid(model)
        soc_grid, _, ocv, docv = model.ocv.uniform(n_soc, temp)
        r0 = model.r0_ohm.uniform(soc_grid, temp)
        dr0 = np.gradient(r0, soc_grid, axis=1)
        rows = [ocv, docv, r0, dr0]
        rows += [p.r_ohm.uniform(soc_grid, temp) for p in model.rc]
        rows += [p.tau_s.uniform(soc_grid, temp) for p in model.rc]
        ct = getattr(model, "charge_transfer", None)
        if ct is not None:  # b, g, r at every temperature row (linear between the model's breakpoints)
            rows += [np.repeat(np.asarray(c, dtype=float)[:, None], soc_grid.size, axis=1)
                     for c in ct.coefficients(temp)]
        rows.append(np.repeat(temp[:, None], soc_grid.size, axis=1))   # the temperature axis (row_temp)
        packed = np.ascontiguousarray(np.stack(rows), dtype=np.float64)
        packed.setflags(write=False)
        hy = model.hysteresis
        return cls(soc_grid, temp, packed, model.n_rc, float(model.capacity_ah) * SECONDS_PER_HOUR,
                   float(model.coulombic_efficiency), hy is not None,
                   0.0 if hy is None else float(hy.gamma), 0.0 if hy is None else float(hy.max_v),
                   ct is not None)

    # views -------------------------------------------------------------------------------
    @property
    def ocv(self):
        return self.packed[ROW_OCV]

    @property
    def docv(self):
        return self.packed[ROW_DOCV]

    @property
    def r0(self):
        return self.packed[ROW_R0]

    @property
    def dr0(self):
        return self.packed[ROW_DR0]

    @property
    def r_rc(self):
        return self.packed[ROW_RC:ROW_RC + self.n_rc]

    @property
    def tau_rc(self):
        return self.packed[ROW_RC + self.n_rc:ROW_RC + 2 * self.n_rc]

    @property
    def row_ct(self) -> int:
        """Index of the first charge-transfer row (``4 + 2 n_rc``; only when :attr:`has_charge_transfer`)."""
        return ROW_RC + 2 * self.n_rc

    @property
    def row_temp(self) -> int:
        """Index of the packed row that carries the temperature axis (the last: ``4 + 2 n_rc``, or
        ``7 + 2 n_rc`` with the charge-transfer rows)."""
        return self.packed.shape[0] - 1

    @property
    def tables(self):
        """The table rows without the temperature-axis row, (4 + 2 n_rc [+ 3], n_t, n_s) (the C export's)."""
        return self.packed[:self.row_temp]

    @property
    def n_soc(self) -> int:
        return int(self.soc_grid.size)

    @property
    def dsoc(self) -> float:
        return 1.0 / (self.soc_grid.size - 1)

    @property
    def t_min(self) -> float:
        """The lowest temperature row, degC."""
        return float(self.temp_grid[0])

    @property
    def t_max(self) -> float:
        """The highest temperature row, degC."""
        return float(self.temp_grid[-1])

    @property
    def t_step(self) -> float:
        """Mean spacing of the temperature rows, degC (informational: the look-up searches the axis)."""
        return (self.t_max - self.t_min) / (self.temp_grid.size - 1) if self.temp_grid.size > 1 else 1.0

    @property
    def default_temperature_c(self) -> float:
        """Temperature assumed for a missing or implausible sample, degC: the one row's temperature
        of a single-temperature model (where it is valid), else 25 degC (the lab convention)."""
        return float(self.temp_grid[0]) if self.temp_grid.size == 1 else 25.0

    def lookup(self, row: int, soc, temperature_c=None):
        """Python-side bilinear look-up of one packed row (the kernel's rule; for tests/plots)."""
        from socfuse.estimator.filters.kernels import table_value
        s = np.atleast_1d(np.asarray(soc, dtype=float))
        t = np.broadcast_to(np.asarray(25.0 if temperature_c is None else temperature_c, dtype=float), s.shape)
        out = np.array([table_value(self.packed, row, float(a), float(b), self.t_min, self.t_step)
                        for a, b in zip(s, t)])
        return out[0] if np.ndim(soc) == 0 else out

"""KernelTables: a cell model resampled on uniform SOC x temperature grids for the kernels.

The compiled kernels (and the C export) look parameters up by index arithmetic on uniform
grids: ``i = floor(soc / dsoc)``, ``w = soc / dsoc - i``, bilinear in temperature, no search.
All tables are packed in one array ``packed`` of shape ``(4 + 2 n_rc, n_t, n_s)`` with rows
``ocv, docv, r0, dr0, r_rc_1..n, tau_rc_1..n``; the named attributes are views of it.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from socfuse.models.thevenin import SECONDS_PER_HOUR

__all__ = ["KernelTables", "ROW_OCV", "ROW_DOCV", "ROW_R0", "ROW_DR0", "ROW_RC"]

ROW_OCV, ROW_DOCV, ROW_R0, ROW_DR0, ROW_RC = 0, 1, 2, 3, 4
_MAX_T = 41


def _temperature_grid(model) -> np.ndarray:
    """Uniform temperature grid covering every temperature breakpoint of the model.

    The spacing is the smallest gap between the model's breakpoints (so breakpoints on a
    regular lattice are reproduced exactly), with at most 41 points.
    """
    pts = []
    for a in (model.ocv.temperature_c, model.r0_ohm.temperature_c,
              *[p.r_ohm.temperature_c for p in model.rc], *[p.tau_s.temperature_c for p in model.rc]):
        if a is not None and len(a) > 1:
            pts.extend(np.asarray(a, dtype=float).tolist())
    if not pts:
        return np.array([25.0])
    u = np.unique(np.round(pts, 9))
    lo, hi = float(u[0]), float(u[-1])
    step = float(np.min(np.diff(u)))
    n = int(round((hi - lo) / step)) + 1
    n = min(max(n, 2), _MAX_T)
    return np.linspace(lo, hi, n)


@dataclass(frozen=True, eq=False)
class KernelTables:
    """The model on uniform grids.

    Attributes
    ----------
    soc_grid : ndarray (n_s,)  uniform over [0, 1]
    temp_grid : ndarray (n_t,)  uniform, degC (a single 25 degC row for a temperature-free model)
    packed : ndarray (4 + 2 n_rc, n_t, n_s)
    ocv, docv : ndarray (n_t, n_s)   OCV (V) and dOCV/dSOC (V per unit SOC, the PCHIP derivative)
    r0, dr0 : ndarray (n_t, n_s)     R0 (ohm) and dR0/dSOC (ohm per unit SOC, central differences)
    r_rc, tau_rc : ndarray (n_rc, n_t, n_s)   RC resistances (ohm) and time constants (s)
    capacity_as : float              capacity in ampere-seconds
    eta_charge : float               coulombic efficiency applied to charge
    hyst_gamma, hyst_max_v : float   hysteresis rate and magnitude (0 without hysteresis)
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
        packed = np.ascontiguousarray(np.stack(rows), dtype=np.float64)
        packed.setflags(write=False)
        hy = model.hysteresis
        return cls(soc_grid, temp, packed, model.n_rc, float(model.capacity_ah) * SECONDS_PER_HOUR,
                   float(model.coulombic_efficiency), hy is not None,
                   0.0 if hy is None else float(hy.gamma), 0.0 if hy is None else float(hy.max_v))

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
    def n_soc(self) -> int:
        return int(self.soc_grid.size)

    @property
    def dsoc(self) -> float:
        return 1.0 / (self.soc_grid.size - 1)

    @property
    def t_min(self) -> float:
        return float(self.temp_grid[0])

    @property
    def t_step(self) -> float:
        return float(self.temp_grid[1] - self.temp_grid[0]) if self.temp_grid.size > 1 else 1.0

    def lookup(self, row: int, soc, temperature_c=None):
        """Python-side bilinear look-up of one packed row (the kernel's rule; for tests/plots)."""
        from socfuse.estimator.filters.kernels import table_value
        s = np.atleast_1d(np.asarray(soc, dtype=float))
        t = np.broadcast_to(np.asarray(25.0 if temperature_c is None else temperature_c, dtype=float), s.shape)
        out = np.array([table_value(self.packed, row, float(a), float(b), self.t_min, self.t_step)
                        for a, b in zip(s, t)])
        return out[0] if np.ndim(soc) == 0 else out

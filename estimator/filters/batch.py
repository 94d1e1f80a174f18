"""Cross-cell batch EKF: many cells of one model side by side, the loop over cells inside each step.

:func:`estimator.filters.kernels.ekf_run_batch` runs N copies of the scalar loop, one recording
after the other on each core, so its throughput is that of one stream.  Here the cells of a
block (:data:`BLOCK` cells) advance together: at every time step each phase of the filter step
(transition, covariance prediction, measurement, gate and update, projection) is a loop over the
block's cells, and the covariance, the bulk of the arithmetic, is held as structure of arrays
(entry ``(i, j)`` of the lower triangle of every cell contiguous, ``p[L(i, j), cell]``), so its
loops run over cells with unit stride and no dependence on the state layout inside them.
Speed (benchmarks/speed.py, demo cell, 6 states, 2 shared cores, 2026-12-03): about 10 M cell-steps
per CPU-second at 10,000 cells (the block loop compiled without reference counting and the
covariance prediction fused; 5 M before); per cell-step the
scalar model functions take most of it (transition about 95 ns, measurement about 35 ns, the
structure-of-arrays covariance algebra about 40 ns).  Reaching tens of millions needs the
transition and measurement in structure-of-arrays form too, with an exp that vectorises (numba
has no SVML here), i.e. a second copy of the model arithmetic; not done.  The
gate, the update and the SOC projection compute both outcomes and select (branch-free over
cells); the per-cell model arithmetic (:func:`~estimator.filters.kernels._transition`,
:func:`~estimator.filters.kernels._measure`, :func:`~estimator.filters.kernels.gate_rejects`) is the
single-stream kernel's own (inlined), so the model is written once.  Blocks run in parallel
(numba ``prange``).

The covariance algebra mirrors :func:`estimator.filters.kernels._ekf_core` operation by operation
(same operands, same order), so the results equal :func:`estimator.filters.ekf.run_ekf` and
:func:`estimator.filters.ekf.run_ekf_batch_raw` to rounding (the tests ask 1e-12); the
monitored run (input checks, health monitor, fallback) is not batched here.

Recordings given more than once (the same object) are stored once: a Monte Carlo study of one
recording with 10,000 capacity scales reads one copy of the samples.

References
----------
G. L. Plett, "Extended Kalman filtering for battery management systems of LiPB-based HEV
battery packs, part 3", J. Power Sources 134 (2004) 277-292 (the filter).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numba import njit, prange

from socfuse.estimator.filters.ekf import batch_inputs, initial_soc, prior, recording_arrays, setup
from socfuse.estimator.filters.kernels import (ADAPT_CAP, P_ADAPT, P_CAP, P_CAPERR, P_GATE, P_GREL, P_IN, P_SE,
                                               P_SMAX, P_SMIN, P_TDEF, P_TMIN, P_TSTEP, P_VN,
                                               _measure, _qdiag, _temp_index, _transition, gap_variance,
                                               gate_rejects, layout, measurement_variance, polarisation_variance,
                                               resistance_factor, resistance_sigma, soc_from_voltage, specialised,
                                               voltage_outside_envelope, white_factor)
from socfuse.estimator.filters.settings import FilterSettings

__all__ = ["BLOCK", "CellsResult", "ekf_cells_run", "run_ekf_cells", "KEEP_FINAL", "KEEP_SOC", "KEEP_ALL"]

BLOCK = 64          # cells per block (the covariance of a block of 6-state cells is 10 kB)
KEEP_FINAL, KEEP_SOC, KEEP_ALL = 0, 1, 2   # outputs per step: none, soc and sigma, everything


# Pieces of the covariance prediction: each a unit-stride loop over the cells of a block, one
# expression of the single-stream kernel (same operands, same order, so the same rounding) per
# entry of the lower triangle.  One loop per entry rather than one per term (the earlier layout):
# fewer passes over the block, about 20 % faster (benchmarks/speed.py, Dec 2026).
@njit(cache=True, error_model="numpy", inline="always")
def _mul(out, a, b, n):
    for c in range(n):
        out[c] = a[c] * b[c]


@njit(cache=True, error_model="numpy", inline="always")
def _copy(out, a, n):
    for c in range(n):
        out[c] = a[c]


@njit(cache=True, error_model="numpy", inline="always")
def _pred_diag(pij, di, dj, gsi, gj, qi, on_diag, n):
    """``P-[i, j] = d_i d_j P[i, j] + (g_i s2) g_j (+ q_i dt on the diagonal)`` over a block's cells
    (F diagonal; the single-stream kernel's expression, same operands in the same order)."""
    if on_diag != 0.0:
        for c in range(n):
            pij[c] = di[c] * dj[c] * pij[c] + gsi[c] * gj[c] + qi[c]
    else:
        for c in range(n):
            pij[c] = di[c] * dj[c] * pij[c] + gsi[c] * gj[c]


@njit(cache=True, error_model="numpy", inline="always")
def _pred_bias(pij, di, dj, ui, uj, ci, cj, pbb, gsi, gj, n):
    """Off-diagonal ``P-[i, j]`` with the bias column in ``F`` over a block's cells (as the single-stream kernel)."""
    for c in range(n):
        pij[c] = di[c] * dj[c] * pij[c] + ui[c] * cj[c] + ci[c] * uj[c] + ci[c] * cj[c] * pbb[c] + gsi[c] * gj[c]


@njit(cache=True, error_model="numpy", inline="always")
def _pred_bias_diag(pii, di, ui, ci, pbb, gsi, gi, qi, n):
    """Diagonal ``P-[i, i]`` with the bias column in ``F`` over a block's cells (as the single-stream kernel)."""
    for c in range(n):
        pii[c] = di[c] * di[c] * pii[c] + 2.0 * ui[c] * ci[c] + ci[c] * ci[c] * pbb[c] + gsi[c] * gi[c] + qi[c]


@njit(cache=True, error_model="numpy")
def _block(c0, c1, offs, cell_rec, time_s, current_a, voltage_v, temp_c, tab, n_rc, i_b, i_h, i_r, i_e, est_h, prms,
           x0s, p0s, keep, soc_out, sig_out, vpred_out, innov_out, s_out, x_out, x_fin, p_fin, gated_out):
    """Cells ``c0..c1-1`` over all their samples; see :func:`ekf_cells_run`.

    Allocates the block's state and scratch and hands them to :func:`_block_loop`.
    """
    nb = c1 - c0
    nx = x0s.shape[1]
    nl = nx * (nx + 1) // 2
    li = np.empty((nx, nx), dtype=np.int64)   # lower-triangle index of (i, j), either order
    for i in range(nx):
        for j in range(i + 1):
            li[i, j] = i * (i + 1) // 2 + j
            li[j, i] = li[i, j]
    pc = prms[c0].copy()      # the parameter vector handed to the model functions (its P_CAP set per cell)
    cache = np.full(2 * n_rc + 3, np.nan)   # a memo keyed by (dt, tau): shared by the cells
    p = np.empty((nl, nb))
    cols = np.zeros((9, nx, nb))             # x, hs, ph, cb, ub, qd, gs, dd, gss (structure of arrays)
    cells = np.zeros((17, nb))               # per-cell floats (see _block_loop; row 3 unused)
    cells[9] = 1.0                           # wf: the first sample's band-limit factor
    flags = np.zeros((4, nb), dtype=np.bool_)
    ints = np.zeros((5, nb), dtype=np.int64)
    one = np.zeros((8, nx))                  # one cell's vectors: xs, xn, d1, g1, h1, kg1, ph1, q
    _block_loop(c0, c1, offs, cell_rec, time_s, current_a, voltage_v, temp_c, tab, n_rc, i_b, i_h, i_r, i_e, est_h,
                prms, x0s, p0s, keep, soc_out, sig_out, vpred_out, innov_out, s_out, x_out, x_fin, p_fin, gated_out,
                li, pc, cache, p, cols, cells, flags, ints, one)


@njit(cache=True, error_model="numpy", _nrt=False)
def _block_loop(c0, c1, offs, cell_rec, time_s, current_a, voltage_v, temp_c, tab, n_rc, i_b, i_h, i_r, i_e, est_h,
                prms, x0s, p0s, keep, soc_out, sig_out, vpred_out, innov_out, s_out, x_out, x_fin, p_fin, gated_out,
                li, pc, cache, p, cols, cells, flags, ints, one):
    """The time loop of :func:`_block` over the arrays it allocated.

    Compiled without numba's reference counting (``_nrt=False``: it allocates nothing), as
    :func:`estimator.filters.kernels._ekf_loop`: the model functions inlined per cell would
    otherwise count references to their arrays with atomic operations at every cell-step.
    """
    nb = c1 - c0
    nx = x0s.shape[1]
    prm = prms[c0]
    x = cols[0]       # state, structure of arrays
    hs = cols[1]
    ph = cols[2]
    cb = cols[3]
    ub = cols[4]
    qd = cols[5]
    gs = cols[6]
    dd = cols[7]
    gss = cols[8]
    cap = cells[0]
    kgi = cells[1]
    sv = cells[2]
    pbb = cells[4]
    y = cells[5]
    inn = cells[6]
    gh = cells[7]
    s2 = cells[8]
    wf = cells[9]
    run_s = cells[10]
    nu2_avg = cells[11]
    excess = cells[12]
    pwt = cells[13]
    i_lo = cells[14]      # current range seen so far (logging gaps)
    i_hi = cells[15]
    vks = cells[16]
    acc = flags[0]
    run_on = flags[1]
    gap_k = flags[2]
    skip_upd = flags[3]
    pt0 = ints[0]
    pt1 = ints[1]
    gated = ints[2]
    base = ints[3]
    lens = ints[4]
    xs = one[0]        # one cell's state, and scratch for the model functions
    xn = one[1]
    d1 = one[2]
    g1 = one[3]
    h1 = one[4]
    kg1 = one[5]
    ph1 = one[6]
    q = one[7]
    _qdiag(n_rc, i_b, i_h, i_r, i_e, est_h, prm, q)
    ke = 2 * n_rc + 2
    ce2 = prm[P_CAPERR] * prm[P_CAPERR]
    se2 = prm[P_SE] * prm[P_SE]
    adapt = prm[P_ADAPT] if i_e >= 0 else 0.0
    s2i = prm[P_IN] * prm[P_IN]
    vn2 = prm[P_VN] * prm[P_VN]
    gate = prm[P_GATE]
    grel = prm[P_GREL]
    smin = prm[P_SMIN]
    smax = prm[P_SMAX]
    no_h_noise = i_h >= 0 and not est_h
    t_min = prm[P_TMIN]
    t_step = prm[P_TSTEP]
    n_max = 0
    for c in range(nb):
        r = cell_rec[c0 + c]
        base[c] = offs[r]
        lens[c] = offs[r + 1] - offs[r]
        cap[c] = prms[c0 + c, P_CAP]
        i_lo[c] = current_a[base[c]]
        i_hi[c] = i_lo[c]
        if lens[c] > n_max:
            n_max = lens[c]
        for i in range(nx):
            x[i, c] = x0s[c0 + c, i]
            for j in range(i + 1):
                p[li[i, j], c] = p0s[c0 + c, i, j]
    for k in range(n_max):
        # -- transition (per cell: the single-stream model arithmetic)
        if k > 0:
            for c in range(nb):
                if k >= lens[c]:
                    continue
                kk = base[c] + k
                dt = time_s[kk] - time_s[kk - 1]
                u = 0.5 * (current_a[kk - 1] + current_a[kk])
                if run_on[c]:
                    run_s[c] += dt
                for i in range(nx):
                    xs[i] = x[i, c]
                ue = u - xs[i_b] if i_b >= 0 else u
                pc[P_CAP] = cap[c]
                _transition(tab, n_rc, i_b, i_h, i_r, i_e, pc, xs, u, dt, pt0[c], pt1[c], pwt[c], xn, d1, g1, cache)
                for i in range(nx):
                    x[i, c] = xn[i]
                    qd[i, c] = q[i] * dt
                    dd[i, c] = d1[i]
                    gs[i, c] = g1[i]
                qd[0, c] += ce2 * abs(g1[0] * ue)
                ik_ = current_a[kk]
                if ik_ < i_lo[c]:
                    i_lo[c] = ik_
                elif ik_ > i_hi[c]:
                    i_hi[c] = ik_
                gv = gap_variance(pc, dt, i_lo[c], i_hi[c])
                if gv > 0.0:
                    qd[0, c] += gv
                    for j in range(n_rc):  # the RC voltages are unknown after a working gap too
                        qd[1 + j, c] += p0s[c0 + c, 1 + j, 1 + j]
                    gap_k[c] = True
                if i_e >= 0:
                    qd[i_e, c] = cache[ke]
                    if adapt > 0.0:
                        qd[i_e, c] *= (se2 + excess[c]) / se2
                if no_h_noise:
                    gh[c] = g1[i_h]
                    gs[i_h, c] = 0.0
                wf[c] = white_factor(pc, dt)
                s2[c] = s2i * wf[c]
            # -- covariance prediction, structure of arrays.  Each expression of the single-stream
            # kernel is evaluated term by term into ``t`` (same operands, same order, so the same
            # rounding), every loop touching few arrays so that it vectorises over the cells
            for i in range(nx):
                for c in range(nb):
                    gss[i, c] = gs[i, c] * s2[c]
            if i_b < 0:
                for i in range(nx):
                    for j in range(i + 1):
                        _pred_diag(p[li[i, j]], dd[i], dd[j], gss[i], gs[j], qd[i], 1.0 if j == i else 0.0, nb)
            else:
                lbb = li[i_b, i_b]
                _copy(pbb, p[lbb], nb)
                for i in range(nx):
                    lib = li[i, i_b]
                    for c in range(nb):
                        cb[i, c] = -gs[i, c]
                    _mul(ub[i], dd[i], p[lib], nb)
                for c in range(nb):
                    cb[i_b, c] = 0.0
                if no_h_noise:
                    for c in range(nb):
                        cb[i_h, c] = -gh[c]
                for i in range(nx):
                    for j in range(i):
                        _pred_bias(p[li[i, j]], dd[i], dd[j], ub[i], ub[j], cb[i], cb[j], pbb, gss[i], gs[j], nb)
                    _pred_bias_diag(p[li[i, i]], dd[i], ub[i], cb[i], pbb, gss[i], gs[i], qd[i], nb)
        # -- operating envelope, end of a logging gap, measurement (per cell)
        for c in range(nb):
            if k >= lens[c]:
                continue
            kk = base[c] + k
            tk = temp_c[kk]
            skip_upd[c] = False
            vk = voltage_v[kk]
            if voltage_outside_envelope(prm, vk, tk):
                vk = np.nan  # outside the operating envelope: predict only
            vks[c] = vk
            if gap_k[c] and vk == vk:
                # the SOC read from this voltage fused as a direct SOC measurement (as _ekf_core; rare)
                pc[P_CAP] = cap[c]
                zv, sgv = soc_from_voltage(tab, n_rc, pc, vk, current_a[kk], tk)
                den = p[0, c] + sgv * sgv
                dz = zv - x[0, c]
                for i in range(nx):
                    kg1[i] = p[li[i, 0], c] / den
                for i in range(nx):
                    x[i, c] += kg1[i] * dz
                for i in range(nx):
                    ph1[i] = p[li[i, 0], c]
                for i in range(nx):
                    for j in range(i + 1):
                        p[li[i, j], c] = p[li[i, j], c] - kg1[i] * ph1[j]
                skip_upd[c] = True
            it0, it1, wt = _temp_index(tab, tk, t_min, t_step)
            for i in range(nx):
                xs[i] = x[i, c]
            ik = current_a[kk]
            y[c] = _measure(tab, n_rc, i_b, i_h, i_r, i_e, pc, xs, ik, it0, it1, wt, h1)
            for i in range(nx):
                hs[i, c] = h1[i]
            pt0[c] = it0
            pt1[c] = it1
            pwt[c] = wt
            sr = resistance_sigma(tab, prm, it0, it1, wt)
            re2 = sr * sr
            if k > 0:
                r_meas = measurement_variance(vn2, re2, wf[c], resistance_factor(pc, time_s[kk] - time_s[kk - 1]),
                                              ik, current_a[kk - 1], polarisation_variance(pc, xs, n_rc))
            else:
                r_meas = measurement_variance(vn2, re2, 1.0, 1.0, ik, ik, polarisation_variance(pc, xs, n_rc))
            sv[c] = r_meas
        # -- P H and S (structure of arrays)
        for i in range(nx):
            for c in range(nb):
                ph[i, c] = 0.0
            for j in range(nx):
                lij = li[i, j]
                for c in range(nb):
                    ph[i, c] += p[lij, c] * hs[j, c]
            for c in range(nb):
                sv[c] += hs[i, c] * ph[i, c]
        # -- gate (per cell; the outcome is selected below, not branched on)
        for c in range(nb):
            if k >= lens[c]:
                acc[c] = False
                continue
            vk = vks[c]
            valid = vk == vk
            used = valid and not skip_upd[c]   # a gap-end sample's voltage is used up
            innov = vk - y[c]
            rej = used and gate_rejects(innov, sv[c], gate, run_on[c], run_s[c], grel)
            ok = used and not rej
            gated[c] += 1 if rej else 0
            run_s[c] = 0.0 if (rej and not run_on[c]) else run_s[c]   # a run of gated samples begins
            run_on[c] = rej if used else run_on[c]
            acc[c] = ok
            inn[c] = innov if ok else 0.0
            kgi[c] = 1.0 / sv[c]
            if keep == KEEP_ALL:
                vpred_out[k, c0 + c] = y[c]
                s_out[k, c0 + c] = sv[c]
                innov_out[k, c0 + c] = innov if valid else np.nan
        # -- state and covariance update, P+ = P - K S K^T on the lower triangle (selected per cell)
        for i in range(nx):
            for c in range(nb):
                ki = ph[i, c] * kgi[c]
                xv = x[i, c] + ki * inn[c]
                x[i, c] = xv if acc[c] else x[i, c]
                cb[i, c] = ki
            for j in range(i + 1):
                lij = li[i, j]
                for c in range(nb):
                    v = p[lij, c] - cb[i, c] * ph[j, c]
                    p[lij, c] = v if acc[c] else p[lij, c]
        # -- adaptive model error (per cell)
        if adapt > 0.0:
            lee = li[i_e, i_e]
            for c in range(nb):
                if k >= lens[c] or not acc[c]:
                    continue
                wa = 1.0
                if k > 0:
                    kk = base[c] + k
                    dtk = time_s[kk] - time_s[kk - 1]
                    wa = dtk / (adapt + dtk)
                nu2_avg[c] += wa * (x[i_e, c] * x[i_e, c] + p[lee, c] - nu2_avg[c])
                ex_ = nu2_avg[c] - se2
                if not (ex_ > 0.0):
                    ex_ = 0.0
                elif ex_ > ADAPT_CAP * se2:
                    ex_ = ADAPT_CAP * se2
                excess[c] = ex_
        # -- SOC projection (selected per cell; structure of arrays)
        for c in range(nb):
            z = x[0, c]
            lo = z < smin
            out = lo or z > smax
            lim = smin if lo else smax
            kgi[c] = z - lim                      # the excess
            acc[c] = out and p[0, c] > 0.0        # move the correlated states
            x[0, c] = lim if out else z
        for i in range(1, nx):
            li0 = li[i, 0]
            for c in range(nb):
                nv = x[i, c] - p[li0, c] / p[0, c] * kgi[c]
                x[i, c] = nv if acc[c] else x[i, c]
        # -- outputs
        for c in range(nb):
            if k >= lens[c]:
                continue
            p00 = p[0, c]
            if keep >= KEEP_SOC:
                soc_out[k, c0 + c] = x[0, c]
                sig_out[k, c0 + c] = np.sqrt(p00) if p00 > 0.0 else 0.0
            if keep == KEEP_ALL:
                for i in range(nx):
                    x_out[k, c0 + c, i] = x[i, c]
            gap_k[c] = False
            if k == lens[c] - 1:
                for i in range(nx):
                    x_fin[c0 + c, i] = x[i, c]
                    for j in range(nx):
                        p_fin[c0 + c, i, j] = p[li[i, j], c]
    for c in range(nb):
        gated_out[c0 + c] = gated[c]


@njit(cache=True, parallel=True, error_model="numpy")
def ekf_cells_run(offs, cell_rec, time_s, current_a, voltage_v, temp_c, tab, n_rc, i_b, i_h, i_r, i_e, est_h, prms, x0s,
                  p0s, keep, block, soc_out, sig_out, vpred_out, innov_out, s_out, x_out, x_fin, p_fin, gated_out):
    """The EKF over ``C`` cells, blocks of ``block`` cells in parallel (numba ``prange``).

    Parameters
    ----------
    offs : int64 (R + 1,)   recording ``r`` occupies rows ``offs[r]:offs[r+1]`` of the sample arrays
    cell_rec : int64 (C,)   recording of each cell
    time_s, current_a, voltage_v, temp_c : (sum N_r,)   samples (s, A + = discharge, V (NaN missing), degC)
    tab, n_rc, i_b, i_h, est_h : as :func:`estimator.filters.kernels.ekf_run`; ``i_r``, ``i_e`` the
        resistance-scale and model-error states' indices or -1 (the layout, from :func:`estimator.filters.kernels.layout`; compile-time
        constants when called through :func:`estimator.filters.kernels.specialised`)
    prms : (C, N_PRM)   parameter vector per cell (they differ only in the capacity ``P_CAP``)
    x0s, p0s : (C, n_x), (C, n_x, n_x)   priors
    keep : int   :data:`KEEP_FINAL`, :data:`KEEP_SOC` or :data:`KEEP_ALL`
    soc_out, sig_out : (N_max, C) (KEEP_SOC and up) SOC and its sigma; vpred_out, innov_out, s_out
        (N_max, C) and x_out (N_max, C, n_x) (KEEP_ALL); rows past a cell's length are left untouched
    x_fin, p_fin : (C, n_x), (C, n_x, n_x)   state and covariance after each cell's last sample
    gated_out : int64 (C,)   gated samples per cell
    """
    nc = cell_rec.size
    nblk = (nc + block - 1) // block
    for b in prange(nblk):
        c0 = b * block
        c1 = min(nc, c0 + block)
        _block(c0, c1, offs, cell_rec, time_s, current_a, voltage_v, temp_c, tab, n_rc, i_b, i_h, i_r, i_e, est_h, prms,
               x0s, p0s, keep, soc_out, sig_out, vpred_out, innov_out, s_out, x_out, x_fin, p_fin, gated_out)


def _drop_stale_cache() -> None:
    """Forget this module's compiled-code cache when kernels.py has changed since it was written.

    numba's on-disk cache is keyed by the source file of each function only; the functions here
    inline the model functions of :mod:`estimator.filters.kernels`, so an edit there would otherwise
    leave a stale compiled batch kernel in place.  A digest of kernels.py is kept beside the cache.
    """
    import hashlib
    from pathlib import Path

    from socfuse.estimator.filters import kernels

    try:
        digest = hashlib.sha256(Path(kernels.__file__).read_bytes()).hexdigest()
        caches = [f._cache for f in (_block, _block_loop, ekf_cells_run, _mul, _copy, _pred_diag, _pred_bias,
                                     _pred_bias_diag)]
        stamp = Path(caches[0]._cache_path) / "batch.kernels-digest.txt"
        if stamp.is_file() and stamp.read_text().strip() == digest:
            return
        for c in caches:
            c.flush()
        stamp.write_text(digest + "\n")
    except (AttributeError, OSError):  # no cache (NUMBA_DISABLE_JIT) or a read-only location
        pass


_drop_stale_cache()


@dataclass(frozen=True, eq=False)
class CellsResult:
    """Result of :func:`run_ekf_cells` for ``C`` cells (rows past a cell's length are NaN).

    Attributes
    ----------
    lengths : int (C,)   samples per cell
    soc, soc_sigma : (N_max, C) or None   SOC estimate and its sigma (fractions); None with keep="final"
    voltage_pred_v, innovation_v, innovation_var_v2 : (N_max, C) or None   V, V, V^2 (keep="all")
    states : (N_max, C, n_x) or None   full state (keep="all")
    final_state : (C, n_x)   state after each cell's last sample
    final_covariance : (C, n_x, n_x)
    n_gated : int (C,)
    capacity_scales : (C,)
    state_names : tuple of str
    """

    lengths: np.ndarray
    soc: np.ndarray | None
    soc_sigma: np.ndarray | None
    voltage_pred_v: np.ndarray | None
    innovation_v: np.ndarray | None
    innovation_var_v2: np.ndarray | None
    states: np.ndarray | None
    final_state: np.ndarray
    final_covariance: np.ndarray
    n_gated: np.ndarray
    capacity_scales: np.ndarray
    state_names: tuple


_KEEP = {"final": KEEP_FINAL, "soc": KEEP_SOC, "all": KEEP_ALL}


def run_ekf_cells(model, recs, settings: FilterSettings | None = None, soc0s=None, capacity_scales=None,
                  keep: str = "soc", block: int = BLOCK) -> CellsResult:
    """Run the EKF over many cells of one model side by side (cross-cell batch kernel).

    Parameters
    ----------
    model : models.CellModel
    recs : sequence of Recording, one per cell (lengths may differ; the same object given for
        several cells is stored once)
    settings : FilterSettings, optional (default from the model)
    soc0s : None, float or sequence of (float or None), optional   initial SOC per cell (fraction);
        None: from the OCV at the first sample, as :func:`estimator.filters.ekf.run_ekf`
    capacity_scales : sequence of float, optional   multiplier of the model capacity per cell
    keep : {"soc", "all", "final"}   per-step outputs: SOC and sigma (default), everything, or only
        the final state
    block : int   cells per block (parallel unit)

    Returns
    -------
    CellsResult
        Equal to :func:`estimator.filters.ekf.run_ekf` per cell (unmonitored run) to rounding.

    References
    ----------
    G. L. Plett, "Extended Kalman filtering for battery management systems of LiPB-based HEV battery
    packs, part 3", J. Power Sources 134 (2004) 277-292.
    """
    if keep not in _KEEP:
        raise ValueError(f"keep must be one of {', '.join(_KEEP)}, got {keep!r}")
    recs, m, soc0s, scales = batch_inputs(recs, soc0s, capacity_scales, "cells")
    su = setup(model, settings)
    if int(block) < 1:
        raise ValueError(f"block must be a positive number of cells, got {block}")
    uniq: dict = {}
    cell_rec = np.empty(m, dtype=np.int64)
    for c, rec in enumerate(recs):
        cell_rec[c] = uniq.setdefault(id(rec), len(uniq))
    order = [None] * len(uniq)
    for rec in recs:
        order[uniq[id(rec)]] = rec
    lens_r = np.array([r.n for r in order], dtype=np.int64)
    offs = np.concatenate([[0], np.cumsum(lens_r)]).astype(np.int64)
    nx = su.n_x
    x0s = np.empty((m, nx))
    p0s = np.empty((m, nx, nx))
    start: dict = {}
    for c, (rec, z) in enumerate(zip(recs, soc0s)):
        key = (id(rec), z)
        if key not in start:
            start[key] = prior(su, *initial_soc(su, rec, z))
        x0s[c], p0s[c] = start[key]
    prms = np.repeat(np.asarray(su.prm)[None, :], m, axis=0)
    prms[:, P_CAP] = su.prm[P_CAP] * scales
    lengths = lens_r[cell_rec]
    n_max = int(lengths.max()) if m else 0
    kp = _KEEP[keep]
    shp = (n_max, m)
    soc = np.full(shp, np.nan) if kp >= KEEP_SOC else np.empty((1, 1))
    sig = np.full(shp, np.nan) if kp >= KEEP_SOC else np.empty((1, 1))
    allo = [np.full(shp, np.nan) if kp == KEEP_ALL else np.empty((1, 1)) for _ in range(3)]
    x_out = np.full((n_max, m, nx), np.nan) if kp == KEEP_ALL else np.empty((1, 1, nx))
    x_fin = np.full((m, nx), np.nan)
    p_fin = np.full((m, nx, nx), np.nan)
    gated = np.zeros(m, dtype=np.int64)
    if m and n_max:
        cat = [np.ascontiguousarray(np.concatenate(a)) for a in zip(*[recording_arrays(r, float(su.prm[P_TDEF])) for r in order])]
        lay = layout(nx, su.n_rc, su.i_b, su.i_h, su.est_h, su.prm)
        args = (offs, cell_rec, *cat, su.tables.packed, *lay, prms, x0s, p0s, kp, int(block), soc, sig, *allo, x_out,
                x_fin, p_fin, gated)
        specialised(ekf_cells_run, 7, args)(*args)   # compiled once per state layout
    full = kp == KEEP_ALL
    return CellsResult(lengths, soc if kp >= KEEP_SOC else None, sig if kp >= KEEP_SOC else None,
                       allo[0] if full else None, allo[1] if full else None, allo[2] if full else None,
                       x_out if full else None, x_fin, p_fin, gated, scales, su.names)

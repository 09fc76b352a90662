"""The compiled loop over trials behind `validate.model.kernels` (imports numba: load it only
through `kernels`, which falls back to numpy when this module cannot be had).

Every formula is `validate.model.fixed_point`'s, written per trial with the operations in the
same order (sums over standards and mixtures from the first to the last, a count of 1 and a
factor of 1 not multiplied), so a trial's numbers match the numpy path's to round-off. numba
compiles without fast-math (no reordering, no fused multiply-add) and with numpy's error model
(a division by zero gives inf or nan, as on arrays, instead of raising).
"""

from __future__ import annotations

import math

import numba
import numpy as np

_jit = numba.njit(cache=True, error_model="numpy", nogil=True)
LANES = 256  # trials stepped side by side: the loops over them compile to vector instructions


@_jit
def _points(K, std, lo, n_lanes, counts, factors, xs, dxs, x_sum, inv_K, inv_phi_K, derivative):
    """[ML] of every standard at K (xs) for the trials lo .. lo + n_lanes, their count-weighted
    sum (x_sum) and, with `derivative`, d[ML]/dK (dxs): fixed_point.standards_line's loop, 1/K
    formed once for the standards without a factor (inv_K, scratch), as there; inv_phi_K: scratch
    for 1/(K phi) of a standard with a factor. Every lane loop reads whole rows from their first
    element (no per-lane choice of address), so it compiles to plain vector loads."""
    hi = lo + n_lanes
    for t in range(n_lanes):
        x_sum[t] = 0.0
        inv_K[t] = 1.0 / K[t]
    for i in range(counts.size):
        phi, c, one_c, one_phi = factors[i], counts[i], counts[i] == 1.0, factors[i] == 1.0
        M, L, x_i, dx_i = std[0, i, lo:hi], std[1, i, lo:hi], xs[i], dxs[i]
        inv_k = inv_K
        if not one_phi:
            inv_k = inv_phi_K
            for t in range(n_lanes):
                inv_k[t] = 1.0 / (K[t] * phi)
        if derivative:  # two loops, so that neither chooses per lane
            for t in range(n_lanes):
                x, root = _bound(M[t], L[t], inv_k[t])
                x_i[t] = x
                x_sum[t] = x_sum[t] + (x if one_c else c * x)
                dx = x * inv_k[t] * inv_k[t] / root
                dx_i[t] = dx if one_phi else phi * dx
        else:
            for t in range(n_lanes):
                x = _bound(M[t], L[t], inv_k[t])[0]
                x_i[t] = x
                x_sum[t] = x_sum[t] + (x if one_c else c * x)


@_jit
def _bound(m, l_, ik):
    """[ML] of one standard with totals m, l_ at 1/(K phi) = ik, and the root it is formed with."""
    d = m - l_
    root = math.sqrt(d * d + (2.0 * (m + l_) + ik) * ik)
    return 2.0 * m * l_ / (m + l_ + ik + root), root


@_jit
def _centred_sums(std, lo, n_lanes, counts, y_mean, xs, x_mean, out_xx, out_xy):
    """Over the standards, sxx = sum c (x - x_mean)^2 and sxy = sum c (x - x_mean)(A - y_mean)."""
    for t in range(n_lanes):
        out_xx[t] = 0.0
        out_xy[t] = 0.0
    for i in range(counts.size):
        c, one_c, A, x_i = counts[i], counts[i] == 1.0, std[2, i, lo:lo + n_lanes], xs[i]
        for t in range(n_lanes):
            dev = x_i[t] - x_mean[t]
            e = A[t] - y_mean[t]
            out_xx[t] = out_xx[t] + (dev * dev if one_c else c * (dev * dev))
            out_xy[t] = out_xy[t] + (dev * e if one_c else c * (dev * e))


@_jit
def _centred_derivatives(std, lo, n_lanes, counts, y_mean, xs, x_mean, ys, out_xx, out_xy):
    """Over the standards, sum c (x - x_mean) y and sum c y (A - y_mean), y the derivatives ys:
    d sxx/dK / 2 and d sxy/dK."""
    for t in range(n_lanes):
        out_xx[t] = 0.0
        out_xy[t] = 0.0
    for i in range(counts.size):
        c, one_c, A, x_i, y_i = counts[i], counts[i] == 1.0, std[2, i, lo:lo + n_lanes], xs[i], ys[i]
        for t in range(n_lanes):
            dev = x_i[t] - x_mean[t]
            e = A[t] - y_mean[t]
            v = y_i[t]
            out_xx[t] = out_xx[t] + (dev * v if one_c else c * (dev * v))
            out_xy[t] = out_xy[t] + (v * e if one_c else c * (v * e))


@_jit
def _line(K, std, lo, n_lanes, counts, factors, total, y_mean, xs, dxs, out, derivative):
    """The standards' line at K for the trials lo .. lo + n_lanes (fixed_point.standards_line):
    out[0], out[1] = slope, intercept; with `derivative` out[2], out[3] = their derivatives by K.
    xs, dxs: scratch of one row per standard; out[4:13]: scratch of the sums and 1/K."""
    x_sum, sxx, sxy, x_mean, d_sum, d_sxx, d_sxy = out[4], out[5], out[6], out[7], out[8], out[9], out[10]
    _points(K, std, lo, n_lanes, counts, factors, xs, dxs, x_sum, out[11], out[12], derivative)
    for t in range(n_lanes):
        x_mean[t] = x_sum[t] / total
    _centred_sums(std, lo, n_lanes, counts, y_mean, xs, x_mean, sxx, sxy)
    slope, intercept = out[0], out[1]
    for t in range(n_lanes):
        slope[t] = sxy[t] / sxx[t]
        intercept[t] = y_mean[t] - slope[t] * x_mean[t]
    if not derivative:
        return
    _points_sum(dxs, n_lanes, counts, d_sum)
    _centred_derivatives(std, lo, n_lanes, counts, y_mean, xs, x_mean, dxs, d_sxx, d_sxy)
    d_slope, d_intercept = out[2], out[3]
    for t in range(n_lanes):
        d_slope[t] = (d_sxy[t] - slope[t] * (2.0 * d_sxx[t])) / sxx[t]
        d_intercept[t] = -(d_slope[t] * x_mean[t] + slope[t] * (d_sum[t] / total))


@_jit
def _points_sum(values, n_lanes, counts, out):
    """sum c_i values_i over the standards, per trial."""
    for t in range(n_lanes):
        out[t] = 0.0
    for i in range(counts.size):
        c, one_c, v = counts[i], counts[i] == 1.0, values[i]
        for t in range(n_lanes):
            out[t] = out[t] + (v[t] if one_c else c * v[t])


@_jit
def _steps(K, std, mix, weights, lo, n_lanes, counts, factors, total, y_mean, xs, dxs, line, sums, K_new):
    """One Newton step of the trials lo .. lo + n_lanes from K into K_new (fixed_point._step with
    fixed_point.combination)."""
    _line(K, std, lo, n_lanes, counts, factors, total, y_mean, xs, dxs, line, True)
    slope, intercept, d_slope, d_intercept = line[0], line[1], line[2], line[3]
    F, sum_q, sum_qc = sums[0], sums[1], sums[2]
    hi = lo + n_lanes
    for t in range(n_lanes):
        F[t] = 0.0
        sum_q[t] = 0.0
        sum_qc[t] = 0.0
    for j in range(weights.size):
        w = weights[j]
        if w == 0.0:
            continue
        M, L, A = mix[0, j, lo:hi], mix[1, j, lo:hi], mix[2, j, lo:hi]
        for t in range(n_lanes):
            c = (A[t] - intercept[t]) / slope[t]
            free_m = M[t] - c
            free_l = L[t] - c
            den = free_m * free_l
            k = c / den
            F[t] = F[t] + w * k
            wq = w * (1.0 + k * (free_m + free_l)) / den
            sum_q[t] = sum_q[t] + wq
            sum_qc[t] = sum_qc[t] + wq * c
    for t in range(n_lanes):
        dF = -(d_intercept[t] * sum_q[t] + d_slope[t] * sum_qc[t]) / slope[t]
        newton = K[t] - (F[t] - K[t]) / (dF - 1.0)
        K_new[t] = newton if (math.isfinite(newton) and newton > 0) else F[t]


@_jit
def _predicted(change, previous):
    """fixed_point._predicted for one trial."""
    d, p = abs(change), abs(previous)
    predicted = 0.0 if d == 0.0 else d * d * d / (p * p)
    if not math.isfinite(predicted) and math.isfinite(d):
        return math.inf
    return predicted


@_jit
def _fmin(a, b):
    """numpy's fmin: the smaller, ignoring a nan."""
    if math.isnan(a):
        return b
    if math.isnan(b):
        return a
    return a if a <= b else b


@_jit
def _settle(K, K_new, change, previous, active, n_lanes, stop, largest):
    """Take the step in the trials still stepping, keep each lane's largest finite relative
    change of this step in `largest` (the step's history, over the lanes) and stop a trial once
    its change, or its next change predicted from the last two, is at most `stop` or not a number
    (fixed_point._solve_trials); returns how many still step. One loop without branches on the
    lane (a settled lane keeps its numbers by a choice of values), so it compiles to vector
    instructions; the arithmetic of a lane still stepping is that of the trial alone."""
    left = 0
    for t in range(n_lanes):
        on = active[t]
        ch = (K_new[t] - K[t]) / K_new[t]
        before = change[t]
        predicted = _predicted(ch, before)
        size = abs(ch)
        finite = math.isfinite(ch)
        seen = largest[t]
        largest[t] = size if (on and finite and size > seen) else seen
        previous[t] = before if on else previous[t]
        change[t] = ch if on else before
        K[t] = K_new[t] if on else K[t]
        going = on and not (size <= stop or predicted <= stop or not finite)
        active[t] = going
        left += 1 if going else 0
    return left


@_jit
def _begin(std, start, lo, n_lanes, counts, total, K, change, previous, active, y_mean):
    """The lanes' first K, no change yet, all stepping, and the standards' mean reading (which K
    does not change: fixed_point.Columns.readings_centred)."""
    hi = lo + n_lanes
    first = start[lo:hi]
    for t in range(n_lanes):
        K[t] = first[t]
        change[t] = math.nan
        previous[t] = math.nan
        active[t] = True
        y_mean[t] = 0.0
    for i in range(counts.size):
        c, one_c, A = counts[i], counts[i] == 1.0, std[2, i, lo:hi]
        for t in range(n_lanes):
            y_mean[t] = y_mean[t] + (A[t] if one_c else c * A[t])
    for t in range(n_lanes):
        y_mean[t] = y_mean[t] / total


@_jit
def _states(mix, lo, n_lanes, line, states_out):
    """Every mixture's ICE table off the line at the solved K (fixed_point.states_at; ice.py's
    equilibrium_constant)."""
    hi = lo + n_lanes
    slope, intercept = line[0], line[1]
    for j in range(mix.shape[1]):
        M, L, A = mix[0, j, lo:hi], mix[1, j, lo:hi], mix[2, j, lo:hi]
        cs, ms = states_out[0, j, lo:hi], states_out[1, j, lo:hi]
        ls, ks = states_out[2, j, lo:hi], states_out[3, j, lo:hi]
        for t in range(n_lanes):
            c = (A[t] - intercept[t]) / slope[t]
            free_m = M[t] - c
            free_l = L[t] - c
            cs[t] = c
            ms[t] = free_m
            ls[t] = free_l
            ks[t] = c / (free_m * free_l)


@_jit
def _results(mix, lo, n_lanes, line, kept, out_weights, scale, factor, combined, ks, results_out):
    """What the equilibrium model reports of the trials (EquilibriumModel.evaluate's numpy path):
    each mixture's K off the line (as `_states`), nan where not positive, times the trial's
    `scale` (a row of the block's lanes), over `factor`: results_out[j]; with results_out
    holding one more row, sum of out_weights[j] K_j over the `kept` mixtures (from the first, as
    Python's sum), over `factor`: results_out[nm] (log10 is left to numpy). ks: scratch."""
    nm = mix.shape[1]
    hi = lo + n_lanes
    with_combined = results_out.shape[0] > nm
    slope, intercept = line[0], line[1]
    for t in range(n_lanes):
        combined[t] = 0.0
    for j in range(nm):
        M, L, A = mix[0, j, lo:hi], mix[1, j, lo:hi], mix[2, j, lo:hi]
        row = results_out[j, lo:hi]
        for t in range(n_lanes):
            c = (A[t] - intercept[t]) / slope[t]
            k = c / ((M[t] - c) * (L[t] - c))
            k = (k if k > 0 else math.nan) * scale[t]
            row[t] = k / factor
            ks[t] = k
        if kept[j] and with_combined:
            w = out_weights[j]
            for t in range(n_lanes):
                combined[t] = combined[t] + w * ks[t]
    if with_combined:
        row = results_out[nm, lo:hi]
        for t in range(n_lanes):
            row[t] = combined[t] / factor


@_jit
def solve(std, counts, factors, mix, weights, start, max_steps, stop, converged, K_out, line_out, states_out,
          change_out, history, kept, out_weights, scale, factor, results_out):
    """Every trial's fixed point and what is asked of it there (fixed_point._solve_block,
    states_at): std, mix: (M, L, A) x point x trial; fills K_out, line_out (slope, intercept),
    change_out and history[s] (the largest finite |relative change| at step s, -inf where none);
    returns the most steps a trial took. Then, where they have room for the trials: states_out
    (complex, free M, free L, K) x mixture x trial, and results_out (`_results`: the model's
    outputs, so the Monte Carlo engine needs no pass of its own over the ICE tables). Trials step
    LANES at a time; a trial that has settled is no longer changed while the others step."""
    ns, n = std.shape[1], std.shape[2]
    total = 0.0
    for i in range(ns):
        total = total + counts[i]
    xs, dxs = np.empty((ns, LANES)), np.empty((ns, LANES))
    line, sums = np.empty((13, LANES)), np.empty((3, LANES))
    K, K_new, y_mean = np.empty(LANES), np.empty(LANES), np.empty(LANES)
    change, previous = np.empty(LANES), np.empty(LANES)
    active, combined, ks = np.empty(LANES, dtype=np.bool_), np.empty(LANES), np.empty(LANES)
    largest = np.full((max_steps, LANES), -math.inf)  # per step and lane: the history before its max
    one_scale = np.full(LANES, scale[0]) if scale.size == 1 else scale[:0]
    want_states, want_results = states_out.shape[2] == n, results_out.shape[1] == n
    most = 0
    for lo in range(0, n, LANES):
        n_lanes = min(LANES, n - lo)
        hi = lo + n_lanes
        _begin(std, start, lo, n_lanes, counts, total, K, change, previous, active, y_mean)
        for step in range(max_steps):
            _steps(K, std, mix, weights, lo, n_lanes, counts, factors, total, y_mean, xs, dxs, line, sums, K_new)
            most = max(most, step + 1)
            if _settle(K, K_new, change, previous, active, n_lanes, stop, largest[step]) == 0:
                break
        K_block, change_block = K_out[lo:hi], change_out[lo:hi]
        for t in range(n_lanes):
            remaining = _fmin(abs(change[t]), _predicted(change[t], previous[t]))
            # a trial whose correction has not converged has no defined K
            K[t] = K[t] if remaining <= converged else math.nan
            K_block[t] = K[t]
            change_block[t] = remaining
        # the line and the mixtures' states at the solved K (fixed_point.states_at)
        _line(K, std, lo, n_lanes, counts, factors, total, y_mean, xs, dxs, line, False)
        slope_block, intercept_block = line_out[0, lo:hi], line_out[1, lo:hi]
        for t in range(n_lanes):
            slope_block[t] = line[0, t]
            intercept_block[t] = line[1, t]
        if want_states:
            _states(mix, lo, n_lanes, line, states_out)
        if want_results:
            _results(mix, lo, n_lanes, line, kept, out_weights, one_scale if scale.size == 1 else scale[lo:hi],
                     factor, combined, ks, results_out)
    for step in range(most):
        for t in range(LANES):
            if largest[step, t] > history[step]:
                history[step] = largest[step, t]
    return most


def compiled():
    """The compiled `solve`, compiled (or loaded from numba's cache) here for the one signature
    the caller uses, so a failure shows at once and not in the middle of a run."""
    f8, i8 = numba.float64, numba.int64
    a1, a2, a3 = f8[::1], f8[:, ::1], f8[:, :, ::1]
    solve.compile((a3, a1, a1, a3, a1, a1, i8, f8, f8, a1, a2, a3, a1, a1, numba.boolean[::1], a1, a1, f8, a2))
    return solve

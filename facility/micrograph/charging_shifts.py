"""Lines displaced sideways (torn lines, slips of a drifting field): evidence from shifts.

While the surface potential changes, the beam is deflected: single lines or short groups of
lines are torn sideways from some point on, and a drifting field slips by a few pixels between
one line and the next (``DOMAIN.md``, "What charging looks like in a raster image"). Both show
as a line that fits its neighbours only once shifted. Two estimates:

* :func:`tear_search_evidence` — an explicit search over whole-pixel shifts of 64-px segments of
  the worst-fitting lines (``torn_segments``, ``slip_gain``, ``line_tear_ratio``);
* :func:`shift_evidence` — a sub-pixel (Lucas–Kanade) shift of every line against the mean of
  its two neighbours, per 32-px strip, summed over whole lines (``shift_line_z``) and over runs
  of strips (``shift_run_z``); the same down the columns (``*_columns``) measures what the
  specimen alone gives, and ``shift_ratio`` / ``shift_run_ratio`` are the line values over
  (1 + the column values).

A uniform shear of the whole frame cannot be told from a specimen that is itself slanted (it is
an affine change of the specimen); only the slips and the changes of the drift are seen.
"""

from __future__ import annotations

import numpy as np
from scipy import ndimage

SEGMENT = 64  # segment width (px) for the whole-pixel tear search
MAX_SHIFT = 12  # largest tear searched for (px)
SHIFT_STRIP = 32  # strip width (px) for the sub-pixel line shifts
SHIFT_MAX = 12.0  # larger fitted shifts are near-horizontal edges, not displaced lines


def tear_search_evidence(f: np.ndarray) -> dict[str, float]:
    """Torn lines and slips by an explicit search over whole-pixel shifts (``SEGMENT`` px).

    For the lines that fit their neighbours worst, the horizontal shift of each segment that
    fits best: a segment that fits the mean of its neighbours only once shifted, or fits the
    line above and the line below at shifts that do not cancel (a sloping edge gives
    s_up = −s_down), is torn (``torn_segments``, per 256 lines); the same on whole lines gives
    ``slip_gain`` and ``line_tear_ratio`` (how much better the best shift fits than none).
    """
    h, w = f.shape
    nseg = (w - 2 * MAX_SHIFT) // SEGMENT
    if h < 8 or nseg < 1:
        return {"torn_segments": 0.0, "slip_gain": 1.0, "line_tear_ratio": 1.0}
    half = f[:, ::2]  # every second column is enough to rank the lines
    step_up = np.diff(half, axis=0)
    curv = step_up[1:] - step_up[:-1]  # line − mean of neighbours, times −2
    misfit = 0.25 * np.mean(curv * curv, axis=1, dtype=np.float64)
    local = ndimage.median_filter(misfit, size=9, mode="nearest") + 1e-12
    n_cand = int(min(40, max(8, h // 8)))
    cand = np.argsort(misfit / local)[-n_cand:] + 1
    typical = float(np.median(misfit)) + 1e-12
    up_typ = float(np.median(np.mean(step_up * step_up, axis=1, dtype=np.float64))) + 1e-12

    x0, x1 = MAX_SHIFT, MAX_SHIFT + nseg * SEGMENT
    line = f[cand].astype(np.float64)
    above = f[cand - 1, x0:x1].astype(np.float64)
    below = f[cand + 1, x0:x1].astype(np.float64)
    both = 0.5 * (above + below)
    shifts = np.arange(-MAX_SHIFT, MAX_SHIFT + 1)
    shape = (cand.size, nseg, SEGMENT)
    cost_up = np.empty((shifts.size, cand.size, nseg))
    cost_dn = np.empty_like(cost_up)
    cost_both = np.empty_like(cost_up)
    for i, s in enumerate(shifts):
        moved = line[:, x0 + s : x1 + s]
        cost_up[i] = ((moved - above) ** 2).reshape(shape).mean(axis=2)
        cost_dn[i] = ((moved - below) ** 2).reshape(shape).mean(axis=2)
        cost_both[i] = ((moved - both) ** 2).reshape(shape).mean(axis=2)
    zero = MAX_SHIFT
    far = np.abs(shifts) >= 1
    best_both = cost_both[far].min(axis=0)
    # a single torn line: it fits the mean of its neighbours only once shifted back
    single = (cost_both[zero] > 3.0 * best_both) & (cost_both[zero] > 2.0 * typical)
    single &= best_both < 2.0 * typical
    # the first line of a torn band or a slip: the fits up and down need shifts that do not
    # cancel (a sloping edge gives s_up = −s_down)
    s_up = shifts[np.argmin(cost_up, axis=0)]
    s_dn = shifts[np.argmin(cost_dn, axis=0)]
    # a best fit at the edge of the search (a near-horizontal edge) is no fit at all
    inside = (np.abs(s_up) < MAX_SHIFT) & (np.abs(s_dn) < MAX_SHIFT)
    best_up = cost_up.min(axis=0)
    best_dn = cost_dn.min(axis=0)
    pair = inside & (np.abs(s_up + s_dn) >= 2) & (cost_up[zero] > 3.0 * best_up)
    pair &= (best_up < 2.0 * up_typ) & (best_dn < 2.0 * up_typ) & (cost_up[zero] > 2.0 * up_typ)
    torn = single | pair
    # whole lines: summing the segment costs lets a slip show where only a few segments carry
    # structure (an edge crossing the line); content slopes cancel over the width
    line_up, line_dn = cost_up.sum(axis=2), cost_dn.sum(axis=2)
    line_both = cost_both.sum(axis=2)
    k = np.arange(cand.size)
    su, sd = np.argmin(line_up, axis=0), np.argmin(line_dn, axis=0)
    gain_up = line_up[zero] / (line_up[su, k] + 1e-12)
    gain_dn = line_dn[zero] / (line_dn[sd, k] + 1e-12)
    busy = line_both[zero] > 1.2 * typical * nseg  # flat (clipped, featureless) lines say nothing
    cancel = np.abs(shifts[su] + shifts[sd]) < 2
    # both fits must be definite: a flat-bottomed cost (a near-horizontal edge) fixes no shift
    cancel |= ~_definite(line_up, su) | ~_definite(line_dn, sd)
    slip_gain = np.where(busy & ~cancel, np.maximum(gain_up, gain_dn), 1.0)
    line_tear = np.where(busy, line_both[zero] / (line_both[far].min(axis=0) + 1e-12), 1.0)
    return {
        "torn_segments": float(np.count_nonzero(torn)) * 256.0 / h,
        "slip_gain": float(slip_gain.max()),
        "line_tear_ratio": float(line_tear.max()),
    }


def _definite(cost: np.ndarray, best: np.ndarray, step: int = 2, rise: float = 1.25) -> np.ndarray:
    """Whether the cost at ``best`` ± ``step`` shifts is clearly above the minimum (per column)."""
    n = cost.shape[0]
    k = np.arange(cost.shape[1])
    lo, hi = best - step, best + step
    inner = (lo >= 0) & (hi < n)
    left = cost[np.clip(lo, 0, n - 1), k]
    right = cost[np.clip(hi, 0, n - 1), k]
    return inner & (np.minimum(left, right) > rise * cost[best, k])


def shift_evidence(f: np.ndarray) -> dict[str, float]:
    """Sub-pixel shifts of the lines against their neighbours, along the rows and the columns."""
    h, w = f.shape
    # long lines: neighbouring pixels along them averaged (a tear moves many pixels), so that a
    # line has at most about 1024 px; the columns only say what the specimen gives, so on a
    # large frame about 512 px along them and every second one will do
    rows = _bin_along(f, max(1, w // 1024))
    row_line, row_run = _line_shift_evidence(*_shift_sums(rows))
    col_lines = np.ascontiguousarray(_bin_along(f.T, max(1, h // 512)))
    every = 2 if col_lines.shape[0] >= 1024 else 1
    col_line, col_run = _line_shift_evidence(*_shift_sums(col_lines, every))
    return {
        "shift_line_z": row_line,
        "shift_line_z_columns": col_line,
        "shift_ratio": row_line / (col_line + 1.0),
        "shift_run_z": row_run,
        "shift_run_z_columns": col_run,
        "shift_run_ratio": row_run / (col_run + 1.0),
    }


def _bin_along(f: np.ndarray, k: int) -> np.ndarray:
    """Means of ``k`` neighbouring pixels along axis 1 (``f`` itself for k = 1)."""
    if k <= 1:
        return f
    n = f.shape[1] // k * k
    out = f[:, 0:n:k].astype(np.float32)
    for i in range(1, k):
        out += f[:, i:n:k]
    out *= 1.0 / k
    return out


def _shift_sums(f: np.ndarray, every: int = 1) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Σ r·g', Σ g'², Σ r² per (line, strip); the lines are the rows of ``f``.

    r is the line minus the mean of its two neighbouring lines, g' the slope along the line,
    both after a 5-px box along the line (against noise; it cannot create a shift). With
    ``every`` > 1 only every so many lines are tested (each still against both neighbours).
    """
    n_lines, length = f.shape
    ns = (length - 2) // SHIFT_STRIP
    if n_lines < 8 or ns < 2:
        empty = np.zeros((0, 0))
        return empty, empty, empty
    g = ndimage.uniform_filter1d(np.asarray(f, dtype=np.float32), 5, axis=1)
    span = ns * SHIFT_STRIP
    centre = slice(1, n_lines - 1, every)
    above, below = slice(0, n_lines - 2, every), slice(2, n_lines, every)
    r = g[above, 1 : 1 + span] + g[below, 1 : 1 + span]
    r *= -0.5
    r += g[centre, 1 : 1 + span]
    gx = g[centre, 2 : 2 + span] - g[centre, 0:span]
    gx *= 0.5
    shape = (r.shape[0], ns, SHIFT_STRIP)
    sums = [np.add.reduce((a * b).reshape(shape), axis=2) for a, b in ((r, gx), (gx, gx), (r, r))]
    num, den, err = (s.astype(np.float64) for s in sums)
    return num, den + 1e-12, err + 1e-12


def _line_shift_evidence(num: np.ndarray, den: np.ndarray, err: np.ndarray) -> tuple[float, float]:
    """How strongly single lines are displaced sideways against the lines above and below.

    A 1-D Lucas–Kanade step (Lucas & Kanade 1981): the residual of each line against the mean of
    its two neighbours, r = g_y − (g_{y−1} + g_{y+1})/2, regressed on the line's own slope gives
    the shift that best explains it, per strip of ``SHIFT_STRIP`` px (sums from
    :func:`_shift_sums`). The specimen cancels to first order (a slanted edge is at the mean
    position of its neighbours), whereas a torn line or a slip is not. z = Σ r·g' / √(Σ g'² ·
    typical Σ r²) per strip, the typical Σ r² being the median over lines of that strip (so a
    line that does not fit its neighbours stands out). Strips where the fitted shift exceeds
    ``SHIFT_MAX`` px (a near-horizontal edge) or the slope energy is small (nothing to align) are
    left out. Returns the largest |z| of a whole line and the largest Σ|z|/√n of a run of n ≥ 2
    consecutive strips each with |z| ≥ 1, one sign and a shift that explains ≥ 20 % of its
    residual (ρ² = (Σ r·g')² / (Σ g'² Σ r²) ≥ 0.2): a line torn from some point on.
    """
    if num.size == 0:
        return 0.0, 0.0
    n_lines, ns = num.shape
    typical = np.median(err, axis=0, keepdims=True)
    good = (np.abs(num / den) <= SHIFT_MAX) & (den >= 0.25 * np.median(den))
    z = np.where(good, num / np.sqrt(den * typical), 0.0)
    rho2 = num * num / (den * err)
    # whole lines (slips of the drift move whole lines)
    n_all = (num * good).sum(axis=1)
    d_all = (den * good * typical).sum(axis=1) + 1e-12
    line_z = float(np.max(np.abs(n_all) / np.sqrt(d_all)))
    # runs of strips (a line torn from some point onwards)
    ok = (np.abs(z) >= 1.0) & (rho2 >= 0.2)
    best = np.zeros(n_lines)
    for sign in (1.0, -1.0):
        m = ok & (z * sign > 0)
        count = np.zeros(n_lines)
        acc = np.zeros(n_lines)
        for j in range(ns):
            count = np.where(m[:, j], count + 1, 0)
            acc = np.where(m[:, j], acc + np.abs(z[:, j]), 0.0)
            best = np.maximum(best, np.where(count >= 2, acc / np.sqrt(np.maximum(count, 1)), 0.0))
    return line_z, float(best.max())


__all__ = ["shift_evidence", "tear_search_evidence"]

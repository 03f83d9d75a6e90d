"""Charging in a scanning-electron image: evidence from scan-line statistics, and a score.

Rows are fast-scan lines and time runs along a row, then down the frame. Charging acts in scan
time, so its artefacts are *line events*: they start abruptly on one line or at one point of a
line and relax along the scan, whereas the specimen is blurred by the probe alike in x and y and
has no preferred direction in time. Each piece of evidence compares a line-wise statistic with
what the specimen alone would give (the same statistic down the columns, or the mirror image
along the line). The signs follow the usual description of charging in SEM practice (see
``DOMAIN.md``, "What charging looks like in a raster image"); the statistics are our own.

Evidence (all numbers in :attr:`ChargingResult.evidence`):

* **Clipping** — ``clipped_fraction`` (pixels at the top grey level), ``top_spike_ratio`` (their
  count over the typical count of an occupied grey level just below the top: a spike, not the
  end of a smooth tail), ``clip_density`` (share of clipped pixels inside compact patches rather
  than scattered over rims and noise peaks), ``clip_comet`` (brightness just downstream of the
  clipped runs minus just upstream: charged patches smear along the scan), ``top_gap`` (how far
  below the top the 98th percentile of the other pixels lies: charged patches stand apart from
  the specimen's own brightest pixels) and ``clip_elongation`` (mean run length along the lines
  over that down the columns; reported only).
* **Whole-line jumps** — means of 32-pixel strips of every line; the jump between consecutive
  lines as a 25 %-trimmed mean over the strips (so a feature crossing a few strips does not
  count), in units of its robust spread; ``line_jump`` is the largest jump that is also
  *abrupt*: not shared with the neighbouring line pairs, as the probe-blurred step of a
  horizontal specimen edge is.
* **Streaks** — strip means brighter or darker than both neighbouring lines by at least 3/4 of
  their height over the lines two away (a probe-blurred thin line lifts its neighbours too):
  ``streak_rows``, the same down the columns ``streak_columns`` (isotropic specimen content gives
  both alike) and their ratio ``streak_ratio``.
* **Tails** — ``tail_asymmetry``: along every line, background runs between bright features
  (Otsu's threshold) are compared at their two ends; the end just downstream of a feature carries
  its tail, the other does not, and on a mirror-symmetric specimen the two are alike
  (``tail_asymmetry_columns``, the same down the columns, is reported for comparison).
* **Torn lines and slips** — for the lines that fit their neighbours worst, the horizontal shift
  of each 64-pixel segment that fits best: a segment that fits the mean of its neighbours only
  once shifted, or fits the line above and the line below at shifts that do not cancel (a
  sloping edge gives s_up = −s_down), is torn (``torn_segments``, per 256 lines); the same on
  whole lines gives ``slip_gain`` and ``line_tear_ratio`` (the drift slips of shear).

Each piece is turned into a partial score in [0, 1] by a linear ramp between the level that
clean synthetic images (all scenes, 8 and 16 bit, σ 0.7–7 px, doses 40–1000 e/px, astigmatism up
to 3, offset and gain up to 1.5) stay below and the level of a plainly visible artefact (ramps
in :data:`RAMPS`, set on a seeded synthetic set); the clipping ramps are multiplied, since
clipping alone is also what a high contrast setting gives. The ``score`` combines the partial
scores like independent detections, 1 − Π(1 − sᵢ), and the partial scores are kept in the
evidence (``partial_*``); ``findings`` names those ≥ :data:`DEFAULT_CHARGING_THRESHOLD`, the
level for the ``charging`` flag.

Known limits: a smooth drift (shear) without slips, and tails on scenes with few or very large
features, are often missed; clipping from charging cannot be told from clipping by a contrast
setting that already saturates much of the image.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy import ndimage

DEFAULT_CHARGING_THRESHOLD = 0.5

STRIP = 32  # strip width (px) for the line-mean statistics
SEGMENT = 64  # segment width (px) for the tear search
MAX_SHIFT = 12  # largest tear searched for (px)

# (evidence key, clean level, charged level): partial score = clip((v − lo)/(hi − lo), 0, 1)
RAMPS: dict[str, tuple[float, float]] = {
    "top_spike_ratio": (3.0, 8.0),
    "clipped_fraction": (5e-4, 2e-3),
    "clip_density": (0.6, 0.8),
    "clip_comet": (0.04, 0.09),
    "top_gap": (0.4, 0.5),
    "line_jump": (4.2, 6.0),
    "streak_rows": (0.08, 0.16),
    "tail_asymmetry": (0.02, 0.035),
    "torn_segments": (1.0, 2.5),
    "slip_gain": (1.35, 1.8),
    "line_tear_ratio": (1.45, 1.75),
}


@dataclass
class ChargingResult:
    """Charging score in [0, 1], the evidence behind it and which signs were seen."""

    score: float
    evidence: dict[str, float]
    findings: list[str] = field(default_factory=list)


def measure_charging(image: np.ndarray, *, bit_depth: int | None = None) -> ChargingResult:
    """Measure the signs of specimen charging in one grey image (rows = fast-scan lines).

    ``bit_depth`` gives the top grey level (2**bit_depth − 1) for clipping; without it the level is
    taken from the integer type (or the smallest 2**k − 1 above the data, k = 8…16), or the
    maximum for float data.
    """
    a = np.asarray(image)
    if a.ndim != 2:
        raise ValueError("measure_charging expects a 2-D grey image")
    if min(a.shape) < 4 * STRIP // 2:
        return ChargingResult(0.0, {"too_small": 1.0})
    if not np.issubdtype(a.dtype, np.integer):
        a = np.nan_to_num(a.astype(np.float64, copy=False))
    f = a.astype(np.float32, copy=False)
    top = _top_level(a, bit_depth)

    ev: dict[str, float] = {}
    ev.update(_clipping(a, top))
    rows, cols = _strip_means(f)
    ev["line_jump"] = _abrupt_jump(rows)
    ev["streak_rows"] = _streak_energy(rows)
    ev["streak_columns"] = _streak_energy(cols)
    ev["streak_ratio"] = (ev["streak_rows"] + 0.01) / (ev["streak_columns"] + 0.01)
    # about 200 lines each way are plenty for the tail statistics and keep the cost bounded
    ev["tail_asymmetry"] = _tail_asymmetry(f[:: max(2, f.shape[0] // 200)])
    ev["tail_asymmetry_columns"] = _tail_asymmetry(f[:, :: max(2, f.shape[1] // 200)].T)
    ev.update(_tears(f))

    partial = _partial_scores(ev)
    score = 1.0 - math.prod(1.0 - p for p in partial.values())
    for name, p in partial.items():
        ev[f"partial_{name}"] = p
    findings = [name for name, p in partial.items() if p >= DEFAULT_CHARGING_THRESHOLD]
    ev = {k: float(round(v, 6)) for k, v in ev.items()}
    return ChargingResult(score=float(min(max(score, 0.0), 1.0)), evidence=ev, findings=findings)


def _ramp(value: float, key: str) -> float:
    lo, hi = RAMPS[key]
    return float(min(max((value - lo) / (hi - lo), 0.0), 1.0))


def _partial_scores(ev: dict[str, float]) -> dict[str, float]:
    # clipping counts as charging only as compact patches that stand apart: smeared downstream
    # (comet) or far brighter than the rest of the image; a high contrast setting clips too
    clip = max(_ramp(ev["clip_comet"], "clip_comet"), _ramp(ev["top_gap"], "top_gap"))
    for key in ("top_spike_ratio", "clipped_fraction", "clip_density"):
        clip *= _ramp(ev[key], key)
    return {
        "clipped": clip,
        "line_jumps": _ramp(ev["line_jump"], "line_jump"),
        "streaks": _ramp(ev["streak_rows"], "streak_rows"),
        "tails": _ramp(abs(ev["tail_asymmetry"]), "tail_asymmetry"),
        "torn_lines": _ramp(ev["torn_segments"], "torn_segments"),
        "slips": max(
            _ramp(ev["slip_gain"], "slip_gain"), _ramp(ev["line_tear_ratio"], "line_tear_ratio")
        ),
    }


# --- helpers -------------------------------------------------------------------------------


def _top_level(a: np.ndarray, bit_depth: int | None) -> float:
    if bit_depth:
        return float(2**bit_depth - 1)
    peak = float(a.max())
    if np.issubdtype(a.dtype, np.integer):
        for k in (8, 10, 12, 14, 16):
            if peak <= 2**k - 1:
                return float(2**k - 1)
        return float(np.iinfo(a.dtype).max)
    return peak


def _trimmed_mean(x: np.ndarray, axis: int, cut: float = 0.25) -> np.ndarray:
    """Trimmed mean: on 8-bit data it keeps resolution where the median would be quantised."""
    n = x.shape[axis]
    k = int(n * cut)
    s = np.sort(x, axis=axis)
    return np.take(s, np.arange(k, n - k), axis=axis).mean(axis=axis)


def _robust_sd(x: np.ndarray) -> float:
    # MAD of continuous-valued strip statistics (not of raw 8-bit pixels, where it can be 0)
    x = np.asarray(x, dtype=np.float64).ravel()
    sd = 1.4826 * float(np.median(np.abs(x - np.median(x))))
    return sd if sd > 0 else float(np.std(x)) + 1e-12


def _clipping(a: np.ndarray, top: float) -> dict[str, float]:
    is_int = np.issubdtype(a.dtype, np.integer)
    at_top = a >= top
    n_top = int(np.count_nonzero(at_top))
    step = max(1, int(math.sqrt(a.size / 250_000)))  # histogram figures from ~250 000 pixels
    sub = a[::step, ::step]
    lo = float(np.quantile(sub, 0.01))
    span = max(top - lo, 1e-12)
    ev = {"clipped_fraction": n_top / a.size, "top_spike_ratio": 0.0, "top_gap": 0.0}
    ev.update(clip_density=0.0, clip_elongation=0.0, clip_comet=0.0)
    if n_top == 0:
        return ev
    width = 0.05 * span
    n_sub_top = max(int(np.count_nonzero(sub >= top)), 1)
    band = sub[(sub >= top - width) & (sub < top)]
    if band.size:
        if is_int:
            occupied = int(np.count_nonzero(np.bincount((top - band).astype(np.int64))))
        else:
            occupied = int(np.count_nonzero(np.histogram(band, bins=64)[0]))
        per_level = band.size / max(occupied, 1)
    else:
        per_level = 0.0
    ev["top_spike_ratio"] = n_sub_top / max(per_level, 1.0)
    below = sub[sub < top]
    if below.size:
        ev["top_gap"] = (top - float(np.quantile(below, 0.98))) / span
    if n_top >= 16:
        ys = np.flatnonzero(at_top.any(axis=1))
        xs = np.flatnonzero(at_top.any(axis=0))
        y0, y1 = max(ys[0] - 8, 0), ys[-1] + 9
        x0, x1 = max(xs[0] - 8, 0), xs[-1] + 9
        # patches are tens of pixels across: half resolution keeps the cost bounded on big frames
        k = 2 if (y1 - y0) * (x1 - x0) > 1_000_000 else 1
        m = at_top[y0:y1:k, x0:x1:k]
        size = 5 if k == 1 else 3
        box = _box_count(m, size)
        ev["clip_density"] = float(np.mean(box[m] >= 0.6 * size * size)) if m.any() else 0.0
        # close the Poisson holes of a patch before measuring its runs
        solid = box >= 0.5 * size * size
        ev["clip_elongation"] = _run_count(solid.T) / max(_run_count(solid), 1)
        window = a[y0:y1:k, x0:x1:k].astype(np.float64)
        reach = max(6, round(0.02 * a.shape[1])) // k  # the smear grows with the patches
        ev["clip_comet"] = _clip_comet(solid, window, top, lo, k=reach)
    return ev


def _runs(mask: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Row, start and end (exclusive) of the runs of True along axis 1."""
    edge = np.zeros((mask.shape[0], mask.shape[1] + 2), dtype=np.int8)
    edge[:, 1:-1] = mask
    d = np.diff(edge, axis=1)
    rs, start = np.nonzero(d == 1)
    _, end = np.nonzero(d == -1)
    return rs, start, end


def _box_count(mask: np.ndarray, size: int) -> np.ndarray:
    """Number of True pixels in the size × size box around each pixel (zero outside)."""
    r = size // 2
    p = np.pad(mask.astype(np.uint8), r)
    rows = sum(p[:, i : i + mask.shape[1]] for i in range(size))
    return sum(rows[i : i + mask.shape[0]] for i in range(size))


def _run_count(mask: np.ndarray) -> int:
    """Number of runs of True along axis 1 (so mean run length = pixels / runs)."""
    return int(np.count_nonzero(mask[:, 0])) + int(np.count_nonzero(mask[:, 1:] & ~mask[:, :-1]))


def _clip_comet(solid: np.ndarray, a: np.ndarray, top: float, lo: float, k: int = 6) -> float:
    """Brightness just after clipped runs minus just before them, over (top − 1st percentile).

    Charged patches are smeared downstream (a comet); a saturated feature is blurred alike on
    both sides.
    """
    rs, start, end = _runs(solid)
    w = solid.shape[1]
    ok = (end - start >= 3) & (start >= k) & (end + k <= w)
    if np.count_nonzero(ok) < 3:
        return 0.0
    r, s, e = rs[ok], start[ok], end[ok]
    after = np.mean([a[r, e + j] for j in range(k)], axis=0)
    before = np.mean([a[r, s - 1 - j] for j in range(k)], axis=0)
    return float(np.mean(after - before)) / max(top - lo, 1e-12)


def _strip_means(f: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Means of 32-px strips: (lines × strips) for rows, and the same for columns."""
    h, w = f.shape
    kx, ky = w // STRIP, h // STRIP
    # float32 sums are exact enough: 32 values of at most 2**16
    rows = f[:, : kx * STRIP].reshape(h, kx, STRIP).sum(axis=2).astype(np.float64) / STRIP
    cols = f[: ky * STRIP].reshape(ky, STRIP, w).sum(axis=1).T.astype(np.float64) / STRIP
    return rows, cols


def _abrupt_jump(lines: np.ndarray) -> float:
    step = _trimmed_mean(np.diff(lines, axis=0), axis=1)
    z = np.abs(step) / _robust_sd(step)
    neighbour = np.maximum(np.r_[0.0, z[:-1]], np.r_[z[1:], 0.0])
    # a probe-blurred edge spreads its step over neighbouring line pairs; a jump does not
    return float(np.max(z - 2.0 * neighbour))


def _streak_energy(lines: np.ndarray) -> float:
    """Energy of one-line bumps: strip means above (below) both neighbouring lines.

    A streak lives on one line, so the lines two away are no different from the neighbours;
    a thin specimen line blurred by the probe lifts its neighbours too (the bump is less than
    3/4 of its height over the lines two away) and is not counted.
    """
    mid = lines[2:-2]
    up = mid - lines[1:-3]
    down = mid - lines[3:-1]
    height = np.abs(mid - 0.5 * (lines[:-4] + lines[4:]))
    bump = np.where(up * down > 0, np.minimum(np.abs(up), np.abs(down)), 0.0)
    bump = np.where(bump >= 0.75 * height, bump, 0.0)
    scale = _robust_sd(lines[2:] + lines[:-2] - 2.0 * lines[1:-1]) / math.sqrt(6.0)
    z = bump / scale
    return float(np.mean(np.maximum(z - 3.0, 0.0) ** 2))


def _otsu(values: np.ndarray) -> float:
    """Otsu's threshold (Otsu 1979, between-class variance) on a 128-bin histogram."""
    hist, edges = np.histogram(values, bins=128)
    centres = 0.5 * (edges[:-1] + edges[1:])
    w = np.cumsum(hist).astype(np.float64)
    m = np.cumsum(hist * centres)
    between = (m[-1] * w - m * w[-1]) ** 2 / (w * (w[-1] - w) + 1e-12)
    return float(centres[np.argmax(between[:-1])])


def _tail_asymmetry(f: np.ndarray) -> float:
    """The run-end asymmetry 10 px from the features, if it fades from 2 px to 10 px.

    A tail lasts well beyond 10 px but fades away from its feature; the slope of a strongly
    blurred edge does not reach so far, and a brightness gradient across the background grows
    with the distance instead.
    """
    near = _dark_run_asymmetry(f, gap=2)
    far = _dark_run_asymmetry(f, gap=10)
    if near * far <= 0 or abs(far) > abs(near):
        return 0.0
    return far


def _dark_run_asymmetry(f: np.ndarray, gap: int = 2, window: int = 12) -> float:
    """Brightness at the upstream end minus the downstream end of background runs / contrast.

    Background (dark) runs along each line between bright features (Otsu threshold): the end
    just after a feature carries its tail, the end just before the next feature does not; on a
    mirror-symmetric specimen the two ends are alike. 25 %-trimmed mean over runs, shrunk towards
    0 when there are few runs (n / (n + 100)), since then single structures dominate.
    """
    sub = f[::2, ::2].ravel()
    thr = _otsu(sub)
    dark = sub <= thr
    if dark.all() or not dark.any():
        return 0.0
    contrast = float(sub[~dark].mean()) - float(sub[dark].mean())
    if contrast <= 0:
        return 0.0
    h, w = f.shape
    edge = np.zeros((h, w + 2), dtype=np.int8)
    edge[:, 1:-1] = f <= thr
    d = np.diff(edge, axis=1)
    rs, start = np.nonzero(d == 1)
    _, end = np.nonzero(d == -1)  # dark runs cover [start, end)
    ok = (end - start >= 2 * (gap + window)) & (start > 0) & (end < w)
    n = int(np.count_nonzero(ok))
    if n < 10:
        return 0.0
    r, s, e = rs[ok], start[ok], end[ok]
    csum = np.zeros((h, w + 1))
    np.cumsum(f, axis=1, dtype=np.float64, out=csum[:, 1:])
    after = csum[r, s + gap + window] - csum[r, s + gap]
    before = csum[r, e - gap] - csum[r, e - gap - window]
    diff = np.sort(after - before) / window
    k = n // 4
    return float(diff[k : n - k].mean()) / contrast * n / (n + 100.0)


def _tears(f: np.ndarray) -> dict[str, float]:
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


__all__ = ["DEFAULT_CHARGING_THRESHOLD", "ChargingResult", "measure_charging"]

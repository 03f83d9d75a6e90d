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
  horizontal specimen edge is. ``line_jump_drift`` (lines, from the first strip to the last)
  and ``line_jump_drift_t`` say how far that step moves across the lines along the frame: a
  jump happens between the same two lines everywhere, a specimen edge lying almost along the
  scan does not, and discounts the jump.
* **Streaks** — strip means brighter or darker than both neighbouring lines by at least 3/4 of
  their height over the lines two away (a probe-blurred thin line lifts its neighbours too):
  ``streak_rows``, the same down the columns ``streak_columns`` (isotropic specimen content gives
  both alike) and their ratio ``streak_ratio``.
* **Steps between lines** — the same strip means (24 px wide: tails and torn stretches are
  short) stepping from one line to the next by more than twice the larger neighbouring step, in
  units of the same robust spread as the streaks: ``line_steps`` (energy above 3, per strip;
  steps that run on across most of the frame, a straight edge, do not count),
  ``line_steps_columns`` the same down the columns (reported only). Where a tail of a charged
  feature or a torn stretch begins or ends, the signal changes from one line to the next over
  part of a line; the probe-blurred edge of the specimen changes over several lines.
* **Tails** — the two sides of bright features along the lines compared
  (:mod:`.charging_tails`): ``tail_level_near``, ``tail_level_far``, ``tail_edge_votes``,
  their sum on one scale, ``tail_sum``, and the same weighted down where a few large features
  make up the bright phase (``tail_features``, ``tail_weighted``).
* **Torn lines and slips** — lines that fit their neighbours only once shifted
  (:mod:`.charging_shifts`): ``torn_segments``, ``slip_gain``, ``line_tear_ratio`` from a search
  over whole-pixel shifts, and ``shift_ratio`` (whole lines) and ``shift_run_ratio`` (lines torn
  from some point on) from sub-pixel shifts, each against the same measured down the columns.

Each piece is turned into a partial score in [0, 1] by a linear ramp between the level that
clean synthetic images (all scenes, 8 and 16 bit, σ 0.7–7 px, doses 40–1000 e/px, astigmatism up
to 3, offset and gain) stay below and the level of a plainly visible artefact (:data:`RAMPS`,
set on seeded development sets — twice 432 clean and 420 charged images made like the test set
of ``tests/micrograph/test_charging.py`` with other seeds (``benchmarks/charging_devset.py``,
seeds 20000/30000 and 40000/50000), the first 432 clean cases drawn by an earlier revision of
the generator, and 4 × 168 clean and 40 charged made like the set of
``tests/micrograph/test_accuracy.py`` with other seeds — never on the test sets); the clipping
ramps are multiplied, since clipping alone is also what a high contrast setting gives.
The ``score`` combines the partial scores like independent detections, 1 − Π(1 − sᵢ), and the
partial scores are kept in the evidence (``partial_*``); ``findings`` names those ≥
:data:`DEFAULT_CHARGING_THRESHOLD`, the level for the ``charging`` flag.

Known limits (figures in ``tests/micrograph/test_charging.py``): tails are found on about
two thirds to three quarters of the charged images (0.72 on the development set, 0.67 on the
test set), most of them through the steps between lines where a tail band begins or ends; on
scenes made of a few large regions (the weighting by the effective number of features cannot
lift those) and along long slanted fibres, whose tails begin at a different place on every line
and so make no step, they cannot be told from the specimen's own asymmetries at a low
false-alarm rate, and neither a time-reversibility test on the increments along the lines nor
per-feature z-scores of the level asymmetry did better on the development set, nor an
edge-anchored profile shape pooled over all crossings (the dark side of falling edges against
the mirrored dark side of rising ones, each over its own step; see :mod:`.charging_tails`), nor
a jackknife z-score of the level asymmetry over blocks of lines and of columns; a uniform drift
(shear) is an affine change of the specimen and cannot be seen, only its slips; tears and slips
of a few pixels under a probe of σ ≳ 4 px, and tears inside uniform regions, are mostly missed;
clipping from charging cannot be told from clipping by a contrast setting that already
saturates much of the image. Horizontal specimen edges under a probe that is narrower than a
pixel across the lines (an astigmatic probe with its long axis along the scan) step from one
line to the next exactly as a whole-line jump or a tail band does; where such an edge lies
within a few hundredths of a degree of the scan its step does not move across the lines along
the frame, and it is taken for a jump. Scenes of such edges make about half of the clean
images flagged on the development sets (14 of 27: as jumps, steps, slips or tails).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy import ndimage

from .charging_shifts import shift_evidence, tear_search_evidence
from .charging_tails import tail_evidence

DEFAULT_CHARGING_THRESHOLD = 0.5

STRIP = 32  # strip width (px) for the line-mean statistics
STEP_STRIP = 24  # strip width (px) for the steps between lines (part of a line: tails are short)
LONG_STEP_SPAN = 0.75  # a step chained across this share of the strips is a straight edge
MAX_DRIFT_T = 1e3  # the drift's t-value is reported up to this (it is exact without noise)

# evidence key → (clean level, charged level): partial score = clip((v − lo)/(hi − lo), 0, 1).
# Set on the development sets (see the module docstring) so that the flag is raised on no more
# than about 4 % of their clean images (2.1 % and 4.2 % on the two per-kind sets); the
# whole-line and partial-line sub-pixel shifts only count when they are strong, since below
# that the whole-pixel search already finds what they find.
RAMPS: dict[str, tuple[float, float]] = {
    "top_spike_ratio": (3.0, 8.0),
    "clipped_fraction": (5e-4, 2e-3),
    "clip_density": (0.6, 0.8),
    "clip_comet": (0.04, 0.09),
    "top_gap": (0.4, 0.5),
    "line_jump": (3.5, 4.3),
    "line_jump_drift": (0.2, 0.4),  # lines across the frame
    "line_jump_drift_t": (2.5, 3.5),
    "streak_rows": (0.06, 0.11),
    "line_steps": (0.024, 0.036),
    "tail_sum": (4.7, 5.5),
    "tail_weighted": (2.4, 3.0),
    "torn_segments": (1.0, 2.5),
    "shift_run_ratio": (4.2, 5.4),
    "slip_gain": (1.35, 1.8),
    "line_tear_ratio": (1.33, 1.5),
    "shift_ratio": (1.9, 2.3),
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
    ev["line_jump"], ev["line_jump_drift"], ev["line_jump_drift_t"] = _abrupt_jump(rows)
    ev["streak_rows"] = _streak_energy(rows)
    ev["streak_columns"] = _streak_energy(cols)
    ev["streak_ratio"] = (ev["streak_rows"] + 0.01) / (ev["streak_columns"] + 0.01)
    rows, cols = _strip_means(f, STEP_STRIP)
    ev["line_steps"] = _step_energy(rows)
    ev["line_steps_columns"] = _step_energy(cols)
    ev.update(tail_evidence(f))
    ev.update(tear_search_evidence(f))
    ev.update(shift_evidence(f))

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
        # a step that moves across the lines along the frame is a specimen edge, not a jump
        "line_jumps": _ramp(ev["line_jump"], "line_jump")
        * (
            1.0
            - _ramp(abs(ev["line_jump_drift"]), "line_jump_drift")
            * _ramp(ev["line_jump_drift_t"], "line_jump_drift_t")
        ),
        "streaks": _ramp(ev["streak_rows"], "streak_rows"),
        # steps between lines over part of a line (where tails and torn stretches start or end)
        "line_steps": _ramp(ev["line_steps"], "line_steps"),
        # the weighted sum (few large features count less) finds the tails on many-feature
        # scenes; the plain sum still finds strong ones on few-feature scenes
        "tails": max(
            _ramp(ev["tail_sum"], "tail_sum"), _ramp(ev["tail_weighted"], "tail_weighted")
        ),
        # part of a line displaced (from some point on)
        "torn_lines": max(
            _ramp(ev["torn_segments"], "torn_segments"),
            _ramp(ev["shift_run_ratio"], "shift_run_ratio"),
        ),
        # whole lines displaced (the slips of a drifting field, whole torn lines)
        "slips": max(
            _ramp(ev["slip_gain"], "slip_gain"),
            _ramp(ev["line_tear_ratio"], "line_tear_ratio"),
            _ramp(ev["shift_ratio"], "shift_ratio"),
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


def _strip_means(f: np.ndarray, width: int = STRIP) -> tuple[np.ndarray, np.ndarray]:
    """Means of ``width``-px strips: (lines × strips) for rows, and the same for columns."""
    h, w = f.shape
    kx, ky = w // width, h // width
    # float32 sums are exact enough: a few tens of values of at most 2**16
    rows = f[:, : kx * width].reshape(h, kx, width).sum(axis=2).astype(np.float64) / width
    cols = f[: ky * width].reshape(ky, width, w).sum(axis=1).T.astype(np.float64) / width
    return rows, cols


def _abrupt_jump(lines: np.ndarray) -> tuple[float, float, float]:
    """The largest abrupt whole-line jump, and how its step drifts across the frame.

    Returns the jump (z-score less twice the larger neighbouring one) and, for the line pair
    where it is largest, :func:`_step_drift`.
    """
    diff = np.diff(lines, axis=0)
    step = _trimmed_mean(diff, axis=1)
    z = np.abs(step) / _robust_sd(step)
    neighbour = np.maximum(np.r_[0.0, z[:-1]], np.r_[z[1:], 0.0])
    # a probe-blurred edge spreads its step over neighbouring line pairs; a jump does not
    abrupt = z - 2.0 * neighbour
    k = int(np.argmax(abrupt))
    drift, t = _step_drift(diff, k, float(np.sign(step[k])))
    return float(abrupt[k]), drift, t


def _step_drift(diff: np.ndarray, k: int, sign: float) -> tuple[float, float]:
    """How far the step at line pair ``k`` moves across the frame, strip by strip.

    A change of the whole line happens between the same two lines in every strip; the edge of a
    specimen lying almost along the scan (a specimen is seldom aligned to the scan to better
    than a tenth of a degree; common practice, no source) steps between lines that move along
    the frame. For each strip, the centre of the step over the line pairs k − 2 … k + 2; a
    straight line fitted through the centres gives the drift from the first strip to the last
    (in lines) and the t-value of its slope. Fewer than four strips carrying the step give
    (0, 0).
    """
    if sign == 0.0:
        return 0.0, 0.0
    lo, hi = max(k - 2, 0), min(k + 3, diff.shape[0])
    part = np.maximum(diff[lo:hi] * sign, 0.0)
    weight = part.sum(axis=0)
    if not np.any(weight > 0):
        return 0.0, 0.0
    ok = weight > 0.5 * np.median(weight[weight > 0])
    if np.count_nonzero(ok) < 4:
        return 0.0, 0.0
    x = np.flatnonzero(ok).astype(np.float64)
    centre = (np.arange(lo, hi)[:, None] * part[:, ok]).sum(axis=0) / weight[ok]
    slope, intercept = np.polyfit(x, centre, 1)
    resid = centre - (intercept + slope * x)
    spread = np.sum((x - x.mean()) ** 2)
    se = math.sqrt(float(np.sum(resid**2)) / (x.size - 2) / spread)
    drift = float(slope * (diff.shape[1] - 1))
    if se == 0.0:  # centres exactly on a line (a noise-free image): certain, whatever the slope
        return drift, 0.0 if slope == 0.0 else MAX_DRIFT_T
    return drift, min(float(abs(slope) / se), MAX_DRIFT_T)


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
    scale = _line_noise(lines)
    z = bump / scale
    return float(np.mean(np.maximum(z - 3.0, 0.0) ** 2))


def _line_noise(lines: np.ndarray) -> float:
    """Robust spread of one strip mean from line to line, from the second differences down the
    frame (for white noise of spread s they have spread s·√6), the scale of streaks and steps."""
    return _robust_sd(lines[2:] + lines[:-2] - 2.0 * lines[1:-1]) / math.sqrt(6.0)


def _step_energy(lines: np.ndarray) -> float:
    """Energy of abrupt steps between consecutive lines, strip by strip.

    A step of the signal from one line to the next over part of a line — where a tail or a torn
    stretch begins or ends, where the charge state changes under way — is not shared with the
    neighbouring line pairs; the probe-blurred step of a horizontal specimen edge is (the step
    counts only by how far it exceeds twice the larger neighbouring step). Steps that run along
    most of the frame (:func:`_long_steps`) do not count. Same scale and threshold as
    :func:`_streak_energy`.
    """
    diff = np.diff(lines, axis=0)
    step = np.abs(diff)
    abrupt = step[1:-1] - 2.0 * np.maximum(step[:-2], step[2:])
    scale = _line_noise(lines)
    energy = np.maximum(abrupt / scale - 3.0, 0.0) ** 2
    energy[_long_steps(diff)[1:-1]] = 0.0
    return float(np.mean(energy))


def _long_steps(diff: np.ndarray) -> np.ndarray:
    """Steps that run along most of the frame width, as a mask of ``diff`` (line pairs × strips).

    A specimen edge lying almost along the scan steps by a pixel with the probe narrower than a
    pixel across the lines, exactly as a charging event does; but it runs on across the frame,
    from strip to strip within a line of where it was (a whole-line jump does too, and is
    weighed by ``line_jump``). Steps of one sign above 3 robust spreads, chained through
    neighbouring strips and lines, that span at least ``LONG_STEP_SPAN`` of the strips.
    """
    sd = _robust_sd(diff)
    out = np.zeros(diff.shape, dtype=bool)
    for sign in (1.0, -1.0):
        mask = diff * sign > 3.0 * sd
        labels, n = ndimage.label(mask, structure=np.ones((3, 3)))
        if n == 0:
            continue
        wide = np.array(
            [
                sl[1].stop - sl[1].start >= LONG_STEP_SPAN * diff.shape[1]
                for sl in ndimage.find_objects(labels)
            ]
        )
        out |= mask & wide[labels - 1]
    return out


__all__ = ["DEFAULT_CHARGING_THRESHOLD", "RAMPS", "ChargingResult", "measure_charging"]

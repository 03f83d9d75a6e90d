"""Tails of charged features along the scan lines: the evidence behind the ``tails`` finding.

A charged feature disturbs the detector signal while the beam scans it, and the disturbance
relaxes along the line after the beam has left the feature: a bright (or dark) tail downstream,
nothing upstream (``DOMAIN.md``, "What charging looks like in a raster image"). A specimen has no
direction in time: seen along a line, what lies just after a bright feature is, over the image,
like what lies just before one. Both statistics below compare the two sides of bright features
along the lines; the same statistics down the columns are reported for comparison (they see the
specimen only). The statistics are our own.

* ``tail_level_near`` / ``tail_level_far`` — background brightness 1–4 px and 5–10 px after a
  feature minus the same before one, over the feature contrast;
* ``tail_edge_votes`` — features whose downstream edge is much softer than their upstream one,
  net, per feature (a tail softens the fall);
* ``tail_sum`` — the three on one scale (each over its typical level on clean images) and added;
* ``tail_features`` — the effective number of bright features, Kish's effective sample size
  (Σ aᵢ)² / Σ aᵢ² of the feature areas aᵢ (Kish, *Survey Sampling*, 1965; from memory): one
  feature filling the frame counts 1, a hundred equal particles count 100;
* ``tail_weighted`` — ``tail_sum`` · √(n / (n + ``FEATURE_SHRINK``)), n = ``tail_features``.

Few or very large features (a surface cut by a handful of straight boundaries) give few
independent samples, so the specimen's own left/right asymmetry scatters more there; the
weighting lowers the sum on such images, which lets its ramp sit lower for the many-feature ones.
Both numbers are unchanged by mirroring the image (the time direction plays no part in them).

Tried and left out (development set, 768 clean and 79 tails images at strength ≥ 0.3): an
edge-anchored profile shape pooled over all crossings of a line pair, not per feature — the dark
side of each falling edge (its near part, e.g. 1–4 px, against its far part, 6–11 px, over that
crossing's own step height) minus the same on the mirrored dark side of rising edges, with a
block-jackknife spread over the lines and the same down the columns for reference. Anchored at
strong derivative peaks (isolated by ±10–30 px; also with the point symmetry I(x₀ + d) + I(x₀ − d)
− high − low of a blurred step as the residual) only 1–15 % of tails images passed the clean 98th
percentile, hardly better than chance; anchored at the Otsu crossings 8–23 %, but as an extra
finding at a ramp that keeps the clean flag rate near 2 % it found 2 more of the 60 tails images of
the first set (0.53 → 0.57) for 3 more clean images flagged (8 → 11 of 432; second set 8 → 9 of
336), so it is not used. On the edge scene only the boundaries of the charged regions carry a tail,
a small share of all crossings, and a handful of long straight boundaries crossed by every line
give few independent samples, so the pooled difference is diluted and scatters as much on clean
images. Also tried: an angle-normalised edge width — at strong edge pixels (maxima of the
gradient along its direction, Canny-like), the step height over the steepest slope along the
line times |cos φ| of the boundary normal (the blur along a line is stretched by 1/|cos φ|),
the median for falling crossings against that for rising ones (log ratio, block jackknife over
the lines, the same down the columns for reference). It is ≈ 0 on ideal blurred steps at any
angle and 0.08–0.25 with a tail of half the step, but only 1–9 % of the tails images passed the
clean 98th percentile (edge scene 0–33 %): there each boundary is wholly falling or wholly
rising and its neighbours, corners and gratings change its apparent width (clean 98th
percentile of the |log ratio| 1.3–1.6 on that scene, 1.0 even without astigmatism, 0.1–0.6 on
the others); as an extra finding it added at most 2 of the 79 for 4 more clean images flagged.
"""

from __future__ import annotations

import numpy as np
from scipy import ndimage

TAIL_LINE_PAIRS = 96  # line pairs (two adjacent lines averaged) used for the tail statistics
TAIL_NEAR = (1, 4)  # distances (px) from a feature at which its tail is measured
TAIL_FAR = (5, 10)
VOTE_SHRINK = 5.0  # the net vote count is divided by (features + this): a few features say little
FEATURE_SHRINK = 5.0  # tail_weighted = tail_sum · √(n_eff / (n_eff + this)), n_eff from the areas
# typical clean levels of the three statistics (the 95th percentile on clean synthetic images,
# development set): they put the three on one scale before they are added
TAIL_SCALE = {"tail_level_near": 0.05, "tail_level_far": 0.095, "tail_edge_votes": 0.15}


def otsu_threshold(values: np.ndarray) -> float:
    """Otsu's threshold (Otsu 1979, maximum between-class variance) on a 128-bin histogram."""
    hist, edges = np.histogram(values, bins=128)
    centres = 0.5 * (edges[:-1] + edges[1:])
    w = np.cumsum(hist).astype(np.float64)
    m = np.cumsum(hist * centres)
    between = (m[-1] * w - m * w[-1]) ** 2 / (w * (w[-1] - w) + 1e-12)
    return float(centres[np.argmax(between[:-1])])


def tail_evidence(f: np.ndarray) -> dict[str, float]:
    """Tail statistics along the rows (the scan) and, for comparison, down the columns."""
    rows = _tail_stats(_line_pairs(f))
    cols = _tail_stats(_line_pairs(f.T))
    ev = dict(rows)
    ev.update({f"{k}_columns": v for k, v in cols.items()})
    for suffix, stats in (("", rows), ("_columns", cols)):
        total = sum(stats[k] / TAIL_SCALE[k] for k in TAIL_SCALE)
        n = stats["tail_features"]
        ev[f"tail_sum{suffix}"] = total
        ev[f"tail_weighted{suffix}"] = total * float(np.sqrt(n / (n + FEATURE_SHRINK)))
    return ev


def _line_pairs(f: np.ndarray) -> np.ndarray:
    """Means of line pairs (noise down, content kept), lightly smoothed along the line."""
    h = f.shape[0] // 2
    step = max(1, h // TAIL_LINE_PAIRS)
    g = 0.5 * (f[0 : 2 * h : 2][::step] + f[1 : 2 * h : 2][::step]).astype(np.float64)
    # a symmetric 3-px box along the line: it cannot create a direction in time
    return ndimage.uniform_filter1d(g, 3, axis=1)


def _feature_threshold(g: np.ndarray) -> tuple[float, float, float]:
    """Threshold for bright features, and the background and feature levels.

    Otsu's threshold; when the bright class is the matrix (more than half of the image, as on a
    porous surface) its brightest tenth (rims and edges, what charges there) stands for the
    features.
    """
    s = g[::2].ravel()  # every second line pair (not column: a mirror image gets the same)
    thr = otsu_threshold(s)
    lo = float(s[s <= thr].mean()) if np.any(s <= thr) else float(s.min())
    if np.mean(s > thr) > 0.5:
        thr = float(np.quantile(s, 0.9))
    hi = float(s[s > thr].mean()) if np.any(s > thr) else thr
    return thr, lo, hi


def _tail_stats(g: np.ndarray) -> dict[str, float]:
    thr, lo, hi = _feature_threshold(g)
    contrast = hi - lo
    if not contrast > 0:
        return dict.fromkeys((*TAIL_SCALE, "tail_features"), 0.0)
    bright = g > thr
    lab, n = ndimage.label(bright)
    near, far = _level_asymmetry(g, bright, contrast)
    return {
        "tail_level_near": abs(near),
        "tail_level_far": abs(far),
        "tail_edge_votes": abs(_edge_votes(g, bright, lab)),
        "tail_features": _effective_count(lab, n),
    }


def _effective_count(lab: np.ndarray, n: int) -> float:
    """Kish's effective number (Σ a)² / Σ a² of the labelled features, a = their areas."""
    if n == 0:
        return 0.0
    areas = np.bincount(lab.ravel(), minlength=n + 1)[1:].astype(np.float64)
    return float(areas.sum() ** 2 / np.sum(areas * areas))


def _level_asymmetry(g: np.ndarray, bright: np.ndarray, contrast: float) -> tuple[float, float]:
    """Background brightness just after bright features minus just before them, / contrast.

    For every background pixel, the distance along its line to the last feature pixel before it
    and to the next one after it; the mean brightness at distances ``TAIL_NEAR`` and ``TAIL_FAR``
    after a feature minus the same before one. Fewer than 50 pixels on a side give 0.
    """
    _, w = g.shape
    x = np.arange(w)
    last = np.maximum.accumulate(np.where(bright, x, -(10**6)), axis=1)
    nxt = np.minimum.accumulate(np.where(bright, x, 10**6)[:, ::-1], axis=1)[:, ::-1]
    dark = ~bright
    tmax = TAIL_FAR[1]
    sums = {}
    for name, dist in (("after", x - last), ("before", nxt - x)):
        m = dark & (dist <= tmax)
        idx = dist[m]
        sums[name] = (
            np.bincount(idx, weights=g[m], minlength=tmax + 1),
            np.bincount(idx, minlength=tmax + 1),
        )
    (sa, na), (sb, nb) = sums["after"], sums["before"]
    out = []
    for a, b in (TAIL_NEAR, TAIL_FAR):
        n_a, n_b = na[a : b + 1].sum(), nb[a : b + 1].sum()
        if n_a < 50 or n_b < 50:
            out.append(0.0)
            continue
        after = sa[a : b + 1].sum() / n_a
        before = sb[a : b + 1].sum() / n_b
        out.append(float(after - before) / contrast)
    return out[0], out[1]


def _edge_votes(g: np.ndarray, bright: np.ndarray, lab: np.ndarray, reach: int = 3) -> float:
    """Features whose downstream edge is much softer than their upstream one, net, per feature.

    On every line each feature run starts with a rise and ends with a fall; a tail softens the
    fall (the signal relaxes instead of dropping). Each connected feature votes with the median,
    over the lines that cross it, of log(steepest fall / steepest rise) within ``reach`` px of
    the run's ends: +1 above 0.5, −1 below −0.5. One vote per feature rather than per line, since
    one large feature crosses many lines; the net count is shrunk by (n + 5), so that a few
    features say little (``VOTE_SHRINK``). Shading across a feature changes both of its edges
    alike.
    """
    d = np.zeros_like(g)
    d[:, 1:-1] = 0.5 * (g[:, 2:] - g[:, :-2])
    _, w = bright.shape
    edge = np.zeros((bright.shape[0], w + 2), dtype=np.int8)
    edge[:, 1:-1] = bright
    step = np.diff(edge, axis=1)
    rs, start = np.nonzero(step == 1)
    _, end = np.nonzero(step == -1)
    ok = (start > reach + 1) & (end < w - reach - 1) & (end - start >= 2)
    rs, start, end = rs[ok], start[ok], end[ok]
    offsets = np.arange(-reach, reach + 1)
    rise = d[rs[:, None], start[:, None] + offsets].max(axis=1)
    fall = (-d[rs[:, None], end[:, None] - 1 + offsets]).max(axis=1)
    ok = (rise > 0) & (fall > 0)
    if not ok.any():
        return 0.0
    ratio = np.log(fall[ok] / rise[ok])
    comp = lab[rs[ok], start[ok]]
    order = np.lexsort((ratio, comp))
    comp, ratio = comp[order], ratio[order]
    _, first, count = np.unique(comp, return_index=True, return_counts=True)
    keep = count >= 3
    if not keep.any():
        return 0.0
    first, count = first[keep], count[keep]
    # median of each feature's sorted ratios (mean of the middle two for an even count)
    med = 0.5 * (ratio[first + (count - 1) // 2] + ratio[first + count // 2])
    return float((np.sum(med > 0.5) - np.sum(med < -0.5)) / (med.size + VOTE_SHRINK))


__all__ = ["TAIL_SCALE", "otsu_threshold", "tail_evidence"]

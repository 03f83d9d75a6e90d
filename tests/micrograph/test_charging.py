"""Charging artefacts (``synth/charging.py``) and the charging detector (``charging.py``).

The accuracy tests run the detector on a fixed seeded set of synthetic micrographs made with
``make_micrograph`` (all four scenes, 8 and 16 bit, σ 0.7–7 px, dose 40–1000 e/px, astigmatism up
to 3 at any angle, detector offset and gain), 108 clean and 133 charged, and print the figures.
Clean images include the hard cases the issue names: bright particles with the contrast turned
up (some clipping), edge scenes with strong horizontal edges at a sharp probe, and heavy blur.

"Charged" means strength ≥ VISIBLE_STRENGTH (0.3): below that the artefacts are faint enough that
a person would often not call the image charged (our judgement from looking at the generated
images); the weak ones are made and reported but not counted.

The detector's ramps were set on development sets made the same way with other seeds (twice
432 clean and 60 per kind: seeds 20000/30000 and 40000/50000, ``benchmarks/charging_devset.py``;
and 4 × 168 clean and 40 charged made like ``test_accuracy.py``'s set from seeds 777000, 888000,
999000 and 111000), never on this set. Figures at the time of writing, first / second
development set / this test set: clean flagged 2.1 % / 4.2 % / 0.9 % (accuracy-recipe sets
2.7 %, 18 of 672, their charged 146 of 160; the horizontal-edge scenes are the hard group);
detected at strength ≥ 0.3: clipped 0.97 / 0.93 / 0.94, line jumps 0.98 / 0.97 / 0.94, streaks
0.98 / 0.98 / 1.00, tails 0.72 / 0.73 / 0.67, torn lines 0.85 / 0.87 / 0.94, shear 0.83 / 0.73 /
0.78, nonsense 1.00 / 1.00 / 1.00, all kinds 0.905 / 0.888 / 0.897 (113 of 126, one image short
of the issue's 90 % here) — tails on scenes of a few large regions and slips under heavy blur
are missed (see ``facility/micrograph/charging.py``, "Known limits"). The steps between lines
over part of a line (``line_steps``) lifted tails from 0.53 / 0.48 / 0.39 and all kinds from
0.88 / 0.85 / 0.86; with the steps of straight edges left out and jumps whose step drifts across
the lines discounted, clean flagged went from 1.9 % / 4.9 % / 0 % to the figures above
(accuracy-recipe sets from 2.2 %, charged from 143 of 160). Weighting the tail sum by the
effective number of features lifted tails on the first development set from 0.47 to 0.53; an
edge-anchored profile-shape statistic pooled over all crossings was tried and not used (it
gained 2 of 60 tails images on the development set for 3 more of its 432 clean images flagged;
see ``facility/micrograph/charging_tails.py``).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats
from skimage.filters import threshold_otsu

from facility.micrograph.charging import (
    DEFAULT_CHARGING_THRESHOLD,
    RAMPS,
    ChargingResult,
    _trimmed_mean,
    measure_charging,
)
from facility.micrograph.charging_shifts import _shift_sums
from facility.micrograph.charging_tails import otsu_threshold, tail_evidence
from facility.micrograph.synth import make_micrograph
from facility.micrograph.synth.charging import (
    KINDS,
    VISIBLE_STRENGTH,
    ChargingSpec,
    apply_charging,
)

SCENES = ("particles", "fibres", "porous", "edges")
N_CLEAN = 108
N_PER_KIND = 18
N_WEAK = 7


def _loguniform(rng: np.random.Generator, lo: float, hi: float) -> float:
    return float(math.exp(rng.uniform(math.log(lo), math.log(hi))))


def _conditions(seed: int) -> dict:
    """Random but seeded acquisition conditions, spanning the ranges the issue asks for."""
    rng = np.random.default_rng(seed)
    return {
        "seed": seed,
        "scene": SCENES[seed % 4],
        "shape": (256, int(rng.integers(256, 289))),
        "sigma_px": _loguniform(rng, 0.7, 7.0),
        "astigmatism": 1.0 if rng.random() < 0.5 else float(rng.uniform(1.0, 3.0)),
        "angle_deg": float(rng.choice([0.0, 90.0])) if rng.random() < 0.3 else rng.uniform(0, 180),
        "dose": _loguniform(rng, 40.0, 1000.0),
        "bit_depth": int(rng.choice([8, 16])),
        "offset": float(rng.uniform(0.0, 0.15)),
        "gain": _loguniform(rng, 0.6, 1.5),
    }


def _clean_cases() -> list[tuple[str, dict]]:
    cases = []
    for i in range(N_CLEAN):
        c = _conditions(1000 + i)
        kind = "general"
        if i % 6 == 1:  # bright particles, contrast turned up so the brightest rims clip
            c.update(scene="particles", gain=float(np.random.default_rng(i).uniform(1.3, 1.5)))
            kind = "bright particles"
        elif i % 6 == 3:  # strong horizontal edges under a sharp (possibly astigmatic) probe
            c.update(scene="edges", sigma_px=0.7 + 0.5 * (i % 5) / 4, angle_deg=0.0)
            kind = "horizontal edges"
        elif i % 6 == 5:  # heavy blur
            c.update(sigma_px=5.0 + 2.0 * (i % 7) / 6)
            kind = "heavy blur"
        cases.append((kind, c))
    return cases


def _charged_cases() -> list[tuple[str, float, dict]]:
    cases = []
    for k, kind in enumerate(KINDS):
        for j in range(N_PER_KIND):
            c = _conditions(5000 + 100 * k + j)
            s = VISIBLE_STRENGTH + (1.0 - VISIBLE_STRENGTH) * (j + 0.5) / N_PER_KIND
            cases.append((kind, s, c))
    for j in range(N_WEAK):
        c = _conditions(9000 + j)
        cases.append((KINDS[j % len(KINDS)], 0.05 + 0.25 * j / N_WEAK, c))
    return cases


@pytest.fixture(scope="module")
def clean_results() -> list[tuple[str, dict, ChargingResult]]:
    out = []
    for kind, c in _clean_cases():
        img = make_micrograph(**c).image
        out.append((kind, c, measure_charging(img, bit_depth=c["bit_depth"])))
    return out


@pytest.fixture(scope="module")
def charged_results() -> list[tuple[str, float, dict, ChargingResult]]:
    out = []
    for kind, s, c in _charged_cases():
        img = make_micrograph(**c, charging=ChargingSpec((kind,), s)).image
        out.append((kind, s, c, measure_charging(img, bit_depth=c["bit_depth"])))
    return out


def _flagged(r: ChargingResult) -> bool:
    return r.score >= DEFAULT_CHARGING_THRESHOLD


# --- accuracy on the seeded set ------------------------------------------------------------


def test_false_positives_on_clean_images(clean_results) -> None:
    # target from the issue: the flag is raised on ≤ 5 % of clean images
    flagged = [(k, c, r) for k, c, r in clean_results if _flagged(r)]
    print(f"\nclean images flagged: {len(flagged)}/{len(clean_results)}")
    for group in ("general", "bright particles", "horizontal edges", "heavy blur"):
        sub = [r for k, _, r in clean_results if k == group]
        n = sum(_flagged(r) for r in sub)
        print(f"  {group:17s} {n}/{len(sub)}  max score {max(r.score for r in sub):.2f}")
    for k, c, r in flagged:
        print(
            f"  flagged: {k} {c['scene']} σ={c['sigma_px']:.2f} dose={c['dose']:.0f} {r.findings}"
        )
    assert len(flagged) <= 0.05 * len(clean_results)
    # heavy blur must not look charged (σ 5–7 px)
    blur = [r for k, _, r in clean_results if k == "heavy blur"]
    assert sum(_flagged(r) for r in blur) <= 0.05 * len(blur)


def test_detection_on_charged_images(charged_results) -> None:
    visible = [(k, s, r) for k, s, _, r in charged_results if s >= VISIBLE_STRENGTH]
    rates = {}
    print(f"\ncharged images (strength ≥ {VISIBLE_STRENGTH}) detected, by kind:")
    for kind in KINDS:
        sub = [r for k, _, r in visible if k == kind]
        rates[kind] = sum(_flagged(r) for r in sub) / len(sub)
        print(f"  {kind:11s} {rates[kind]:.2f} ({len(sub)} images)")
    overall = sum(_flagged(r) for _, _, r in visible) / len(visible)
    print(f"  all kinds   {overall:.2f} ({len(visible)} images)")
    weak = [(k, s, r) for k, s, _, r in charged_results if s < VISIBLE_STRENGTH]
    n_weak = sum(_flagged(r) for _, _, r in weak)
    print(f"  weak (strength < {VISIBLE_STRENGTH}, not counted): {n_weak}/{len(weak)} detected")
    # the target (≥ 90 %) is met for these kinds (also on the development set) ...
    for kind in ("clipped", "line_jumps", "streaks", "nonsense"):
        assert rates[kind] >= 0.9, kind
    # ... and not for the others: these floors guard what is reached now, below the figures
    # of the development sets (torn lines 0.85 / 0.87, shear 0.83 / 0.73, tails 0.72 / 0.73) and
    # of this one (0.94, 0.78, 0.67; 18 images per kind)
    for kind, floor in (("torn_lines", 0.75), ("shear", 0.65), ("tails", 0.55)):
        assert rates[kind] >= floor, kind


@pytest.mark.xfail(
    strict=True,
    reason="kind-balanced set 0.897 (113 of 126): tails (0.67) and slips under heavy blur "
    "(shear 0.78) are missed; the issue's own set (test_accuracy.py) meets 0.90",
)
def test_overall_detection_on_the_kind_balanced_set(charged_results) -> None:
    # the 90 % applied to this harder mix (every kind equally often, one kind per image:
    # tails, tears and slips make 3 of 7 images here); stays an expected failure until reached
    visible = [r for _, s, _, r in charged_results if s >= VISIBLE_STRENGTH]
    assert sum(_flagged(r) for r in visible) / len(visible) >= 0.9


def test_scores_and_evidence_are_plain_numbers(clean_results, charged_results) -> None:
    for *_, r in list(clean_results) + list(charged_results):
        assert 0.0 <= r.score <= 1.0
        assert all(isinstance(v, float) and math.isfinite(v) for v in r.evidence.values())
    keys = set(clean_results[0][2].evidence)
    for name in ("clipped_fraction", "top_spike_ratio", "line_jump", "streak_rows", "streak_ratio"):
        assert name in keys
    for name in ("tail_sum", "tail_weighted", "torn_segments", "slip_gain", "shift_ratio"):
        assert name in keys
    assert {"line_steps", "line_steps_columns", "partial_line_steps"} <= keys
    assert {"line_jump_drift", "line_jump_drift_t"} <= keys


# --- the artefacts -------------------------------------------------------------------------


def _disc_scene() -> np.ndarray:
    rng = np.random.default_rng(7)
    yy, xx = np.mgrid[0:256, 0:256]
    sig = np.full((256, 256), 100.0)
    for _ in range(30):
        cy, cx, r = rng.uniform(0, 256), rng.uniform(0, 256), rng.uniform(4, 14)
        sig[(yy - cy) ** 2 + (xx - cx) ** 2 < r * r] = 220.0
    return sig


def test_spec_rejects_unknown_kinds_and_strengths() -> None:
    with pytest.raises(ValueError):
        ChargingSpec(("sparkles",), 0.5)
    with pytest.raises(ValueError):
        ChargingSpec(("streaks",), 1.5)


@pytest.mark.parametrize("kind", KINDS)
def test_artefacts_are_seeded_graded_and_leave_the_input_alone(kind: str) -> None:
    sig = _disc_scene()
    before = sig.copy()
    spec = ChargingSpec((kind,), 0.7)
    a = apply_charging(sig, spec, np.random.default_rng(3), 400.0)
    b = apply_charging(sig, spec, np.random.default_rng(3), 400.0)
    assert np.array_equal(sig, before)
    assert np.array_equal(a, b)  # same seed, same artefact
    assert np.all(a >= 0)
    assert not np.allclose(a, sig)
    # strength 0 is no artefact; a stronger one changes more
    zero = apply_charging(sig, ChargingSpec((kind,), 0.0), np.random.default_rng(3), 400.0)
    assert np.array_equal(zero, sig)
    weak = apply_charging(sig, ChargingSpec((kind,), 0.2), np.random.default_rng(3), 400.0)
    assert np.abs(a - sig).sum() > np.abs(weak - sig).sum()


def test_clipped_patches_reach_full_scale() -> None:
    # by definition the patch saturates the detector: expected signal at or above full scale
    sig = _disc_scene()
    out = apply_charging(sig, ChargingSpec(("clipped",), 0.5), np.random.default_rng(1), 400.0)
    assert np.count_nonzero(out >= 400.0) > 100
    assert np.count_nonzero(sig >= 400.0) == 0


def test_line_jumps_move_whole_lines() -> None:
    sig = _disc_scene()
    out = apply_charging(sig, ChargingSpec(("line_jumps",), 0.8), np.random.default_rng(2), 400.0)
    ratio = out / sig
    # a whole-line brightness change: one factor per line, changing from line to line
    assert np.allclose(ratio, ratio[:, :1])
    assert np.ptp(ratio[:, 0]) > 0.1


# --- the detector's building blocks against reference libraries ----------------------------


def test_trimmed_mean_matches_scipy() -> None:
    # reference: scipy.stats.trim_mean (cuts the same share from each end)
    x = np.random.default_rng(0).integers(0, 255, size=(40, 64)).astype(float)
    assert np.allclose(_trimmed_mean(x, axis=1), stats.trim_mean(x, 0.25, axis=1))


def test_otsu_matches_scikit_image() -> None:
    # reference: skimage.filters.threshold_otsu (Otsu 1979), same number of bins
    rng = np.random.default_rng(4)
    values = np.concatenate([rng.normal(60, 8, 5000), rng.normal(150, 15, 2000)])
    width = np.ptp(values) / 128
    assert abs(otsu_threshold(values) - threshold_otsu(values, nbins=128)) <= width


def _textured(seed: int, shape: tuple[int, int] = (256, 256)) -> np.ndarray:
    """A smooth random texture (Gaussian-filtered noise), contrast about ±30 around 100."""
    from scipy import ndimage

    noise = np.random.default_rng(seed).normal(size=shape)
    tex = ndimage.gaussian_filter(noise, 3.0)
    return 100.0 + 30.0 * tex / tex.std()


def test_tail_statistics_do_not_care_for_the_direction_of_time() -> None:
    # a mirrored image is the same specimen scanned the other way: the unsigned asymmetries must
    # come out the same (an exact symmetry of the statistics, common practice, no source)
    img = make_micrograph(
        seed=21, shape=(256, 272), scene="particles", charging=ChargingSpec(("tails",), 0.6)
    ).image.astype(np.float32)
    a, b = tail_evidence(img), tail_evidence(img[:, ::-1])
    keys = ("tail_level_near", "tail_level_far", "tail_edge_votes", "tail_sum", "tail_features")
    for key in (*keys, "tail_weighted"):
        assert a[key] == pytest.approx(b[key], rel=1e-6, abs=1e-9), key


def test_tail_statistics_follow_the_scan_direction() -> None:
    # tails made along the rows show in the row statistics; the same image turned by 90° shows
    # them in the column statistics instead
    sig = _disc_scene()
    tailed = apply_charging(sig, ChargingSpec(("tails",), 0.8), np.random.default_rng(5), 400.0)
    img = np.random.default_rng(6).poisson(tailed).astype(np.float32)
    rows, turned = tail_evidence(img), tail_evidence(np.ascontiguousarray(img.T))
    assert rows["tail_sum"] > 2.0 * rows["tail_sum_columns"]
    assert turned["tail_sum_columns"] == pytest.approx(rows["tail_sum"], rel=1e-6)
    clean = tail_evidence(np.random.default_rng(6).poisson(sig).astype(np.float32))
    assert rows["tail_sum"] > 3.0 * clean["tail_sum"]


def test_effective_feature_count() -> None:
    # Kish's effective sample size (Σ a)² / Σ a² (Kish, Survey Sampling, 1965; from memory):
    # k features of equal area count k; one feature with the rest far smaller counts about 1
    from scipy import ndimage

    from facility.micrograph.charging_tails import _effective_count

    equal = np.zeros((64, 64), dtype=bool)
    for i in range(4):
        equal[4 + 16 * i : 10 + 16 * i, 8:20] = True
    lab, n = ndimage.label(equal)
    assert _effective_count(lab, n) == pytest.approx(4.0)
    uneven = np.zeros((64, 64), dtype=bool)
    uneven[:40, :40] = True
    uneven[50, 50] = uneven[50, 60] = True
    lab, n = ndimage.label(uneven)
    assert _effective_count(lab, n) == pytest.approx(1602**2 / (1600**2 + 2), rel=1e-12)
    assert _effective_count(np.zeros((8, 8), dtype=np.int32), 0) == 0.0


def test_line_shift_matches_scipy_shift() -> None:
    # one line displaced by a known sub-pixel amount with scipy.ndimage.shift (the reference
    # interpolation); the Lucas–Kanade estimate against its neighbours, −Σ r·g' / Σ g'², must
    # recover it (first-order Taylor expansion, Lucas & Kanade 1981)
    from scipy import ndimage

    img = _textured(8).astype(np.float32)
    for d in (0.5, -1.0):
        moved = img.copy()
        moved[100] = ndimage.shift(img[100].astype(np.float64), d, order=3, mode="nearest")
        num, den, _ = _shift_sums(moved)
        est = -num[99].sum() / den[99].sum()  # row 100 is the 99th tested line
        assert est == pytest.approx(d, abs=0.15 * abs(d))
        # the lines around it are not displaced
        assert abs(num[95].sum() / den[95].sum()) < 0.1


def test_torn_line_is_found_and_specimen_is_not() -> None:
    from scipy import ndimage

    img = _textured(9, (256, 320)).astype(np.float32)
    clean = measure_charging(np.clip(img, 0, 255).astype(np.uint8))
    torn = img.copy()
    torn[140, 120:] = ndimage.shift(img[140].astype(np.float64), 3.0, order=1, mode="nearest")[120:]
    r = measure_charging(np.clip(torn, 0, 255).astype(np.uint8))
    assert clean.score < DEFAULT_CHARGING_THRESHOLD
    assert r.score >= DEFAULT_CHARGING_THRESHOLD
    assert r.evidence["shift_run_ratio"] > 2.0 * max(clean.evidence["shift_run_ratio"], 0.5)


def test_a_step_over_part_of_the_lines_is_a_line_step_and_a_blurred_edge_is_not() -> None:
    # construction: a smooth texture (isotropic, so rows and columns alike) and, on lines
    # 100–139, a level raised by 40 from about column 96 to 191, blurred by 2 px along the lines
    # (a band that starts and ends from one line to the next, as the tail of a charged feature
    # does); the same band blurred by 2 px in y as well is a specimen feature blurred by the
    # probe, whose edges are shared by neighbouring lines
    from scipy import ndimage

    rng = np.random.default_rng(13)
    base = np.clip(_textured(10, (256, 288)), 5.0, None)
    band = np.zeros_like(base)
    band[100:140, 96:192] = 40.0
    band = ndimage.gaussian_filter1d(band, 2.0, axis=1)
    stepped = rng.poisson(base + band).astype(np.float32)
    blurred = rng.poisson(base + ndimage.gaussian_filter1d(band, 2.0, axis=0)).astype(np.float32)
    plain = rng.poisson(base).astype(np.float32)
    r, b, c = (measure_charging(x).evidence for x in (stepped, blurred, plain))
    assert r["line_steps"] > 4.0 * RAMPS["line_steps"][1]
    assert r["line_steps_columns"] < RAMPS["line_steps"][0]
    assert b["line_steps"] < RAMPS["line_steps"][0]
    assert c["line_steps"] < RAMPS["line_steps"][0]
    # the same band turned by 90° runs down the columns: the specimen has no scan direction
    turned = measure_charging(np.ascontiguousarray(stepped.T)).evidence
    assert turned["line_steps"] < RAMPS["line_steps"][0]
    assert turned["line_steps_columns"] > 4.0 * RAMPS["line_steps"][1]


def _level_with_edge(drop_lines: float | None) -> np.ndarray:
    """A faint texture around 1000 with a step of 300 below a straight edge that falls
    ``drop_lines`` across the frame, drawn as the share of each pixel below it (a probe
    narrower than a pixel); ``None`` gives no edge."""
    base = 1000.0 + (_textured(14, (256, 288)) - 100.0) / 3.0
    if drop_lines is None:
        return base
    yy, xx = np.mgrid[0:256, 0:288].astype(np.float64)
    edge = 120.3 + drop_lines * xx / 287.0
    return base + 300.0 * np.clip(yy + 0.5 - edge, 0.0, 1.0)


def test_an_edge_along_the_scan_is_not_a_line_jump_but_a_jump_is() -> None:
    # construction: a specimen edge tilted by 0.8 line over the frame (0.16°) steps by a whole
    # pixel within each strip, as a jump does, but between lines that move along the frame
    # (0.71 line from the first 32-px strip to the last); a jump of the whole line's gain (×1.3
    # from line 121 on) steps between the same two lines in every strip (common practice, no
    # source). The strip centres are pulled a little towards the middle line (≈ 0.6).
    for seed in (15, 16):
        rng = np.random.default_rng(seed)
        edge = measure_charging(rng.poisson(_level_with_edge(0.8)).astype(np.float32))
        assert 0.4 < edge.evidence["line_jump_drift"] < 0.9
        assert edge.evidence["line_jump_drift_t"] > RAMPS["line_jump_drift_t"][1]
        assert edge.evidence["line_jump"] > RAMPS["line_jump"][1]  # abrupt, yet not a jump
        assert "line_jumps" not in edge.findings
        # it runs across the frame, so its steps are not partial-line steps either, nor are
        # those of an edge falling 4 lines across the frame
        assert "line_steps" not in edge.findings
        steep = measure_charging(rng.poisson(_level_with_edge(4.0)).astype(np.float32))
        assert "line_steps" not in steep.findings
        gain = np.where(np.arange(256) >= 121, 1.3, 1.0)[:, None]
        jump = measure_charging(rng.poisson(_level_with_edge(None) * gain).astype(np.float32))
        assert abs(jump.evidence["line_jump_drift"]) < RAMPS["line_jump_drift"][0]
        assert "line_jumps" in jump.findings


# --- behaviour on odd input -----------------------------------------------------------------


def test_flat_and_tiny_images() -> None:
    assert measure_charging(np.full((300, 300), 80, dtype=np.uint8)).score == 0.0
    assert measure_charging(np.zeros((20, 500), dtype=np.uint16)).score == 0.0
    with pytest.raises(ValueError):
        measure_charging(np.zeros((64, 64, 3), dtype=np.uint8))


def test_eight_and_sixteen_bit_agree() -> None:
    # the statistics are ratios and z-scores, so a 16-bit copy (×257, top level 65535) of an
    # 8-bit image must score the same
    img = make_micrograph(
        seed=11, shape=(288, 288), scene="particles", charging=ChargingSpec(("streaks",), 0.6)
    ).image
    r8 = measure_charging(img)
    r16 = measure_charging(img.astype(np.uint16) * 257)
    assert abs(r8.score - r16.score) < 0.02
    assert _flagged(r8)


def test_float_image_and_detector_offset() -> None:
    img = make_micrograph(
        seed=12, shape=(288, 288), scene="fibres", charging=ChargingSpec(("line_jumps",), 0.6)
    ).image
    r = measure_charging(img.astype(np.float64) + 1000.0)
    assert _flagged(r)
    assert "line_jumps" in r.findings

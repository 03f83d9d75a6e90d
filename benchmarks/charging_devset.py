"""The charging detector on its development set (prints figures; asserts nothing, times nothing).

The ramps in ``facility/micrograph/charging.py`` were set on this set, not on the seeded test set
of ``tests/micrograph/test_charging.py``: the same recipe (``_conditions`` there: all four scenes,
8 and 16 bit, σ 0.7–7 px, dose 40–1000 e/px, astigmatism up to 3, offset and gain; the same hard
clean groups) with other seeds — 432 clean images from seed 20000 and 60 per charging kind at
strengths 0.3–1 from seed 30000. Prints the share of clean images flagged (per group) and the
share of charged ones detected (per kind, and over all kinds), as the test does for its set.
With ``--accuracy-recipe`` also the second development set: the recipe of
``tests/micrograph/test_accuracy.py`` (square 256/320 px, astigmatism 2–3 at any angle, one or
two charging kinds per charged image) with seeds 777000 and 888000 instead of its own.
Takes a few minutes on one core.

Usage: ``python benchmarks/charging_devset.py [--clean N] [--per-kind N] [--clean-seed S]
[--charged-seed S] [--accuracy-recipe [--recipe-seeds S ...]]``; the second development set is
``--clean-seed 40000 --charged-seed 50000``, the further recipe sets ``--recipe-seeds 777000
888000 999000 111000``.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from facility.micrograph.charging import DEFAULT_CHARGING_THRESHOLD, measure_charging
from facility.micrograph.synth import make_micrograph
from facility.micrograph.synth.charging import KINDS, VISIBLE_STRENGTH, ChargingSpec
from tests.micrograph.test_charging import _conditions

GROUPS = ("general", "bright particles", "horizontal edges", "heavy blur")
RECIPE_SEEDS = (777000, 888000)  # the accuracy-recipe development sets used by default


def _seed(text: str) -> int:
    """A seed for numpy's generator: a whole number ≥ 0."""
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"a seed is a whole number, not {text!r}") from None
    if value < 0:
        raise argparse.ArgumentTypeError(f"a seed is 0 or more, not {value}")
    return value


def clean_cases(n: int, base: int = 20000) -> list[tuple[str, dict]]:
    """The test's clean recipe with other seeds (every sixth image of each hard group)."""
    cases = []
    for i in range(n):
        c = _conditions(base + i)
        rng = np.random.default_rng(base + 7 * i + 3)
        group = "general"
        if i % 6 == 1:  # bright particles, contrast turned up so the brightest rims clip
            c.update(scene="particles", gain=float(rng.uniform(1.3, 1.5)))
            group = "bright particles"
        elif i % 6 == 3:  # strong horizontal edges under a sharp (possibly astigmatic) probe
            c.update(scene="edges", sigma_px=float(rng.uniform(0.7, 1.2)), angle_deg=0.0)
            group = "horizontal edges"
        elif i % 6 == 5:  # heavy blur
            c.update(sigma_px=float(rng.uniform(5.0, 7.0)))
            group = "heavy blur"
        cases.append((group, c))
    return cases


def charged_cases(per_kind: int, base: int = 30000) -> list[tuple[str, float, dict]]:
    cases = []
    for k, kind in enumerate(KINDS):
        for j in range(per_kind):
            s = VISIBLE_STRENGTH + (1.0 - VISIBLE_STRENGTH) * (j + 0.5) / per_kind
            cases.append((kind, s, _conditions(base + 1000 * k + j)))
    return cases


def _flagged(c: dict, spec: ChargingSpec | None) -> bool:
    image = make_micrograph(**c, charging=spec).image
    return measure_charging(image, bit_depth=c["bit_depth"]).score >= DEFAULT_CHARGING_THRESHOLD


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--clean", type=int, default=432)
    parser.add_argument("--per-kind", type=int, default=60)
    parser.add_argument(
        "--clean-seed", type=_seed, default=20000, help="first seed of the clean set"
    )
    parser.add_argument(
        "--charged-seed", type=_seed, default=30000, help="first seed of the charged set"
    )
    parser.add_argument("--accuracy-recipe", action="store_true")
    parser.add_argument(
        "--recipe-seeds",
        type=_seed,
        nargs="+",
        default=list(RECIPE_SEEDS),
        help="seeds of the accuracy-recipe sets (with --accuracy-recipe)",
    )
    args = parser.parse_args()

    clean = [(g, _flagged(c, None)) for g, c in clean_cases(args.clean, args.clean_seed)]
    n = sum(f for _, f in clean)
    print(f"clean images flagged: {n}/{len(clean)} = {n / len(clean):.3f}")
    for group in GROUPS:
        sub = [f for g, f in clean if g == group]
        print(f"  {group:17s} {sum(sub)}/{len(sub)}")

    charged = [
        (k, _flagged(c, ChargingSpec((k,), s)))
        for k, s, c in charged_cases(args.per_kind, args.charged_seed)
    ]
    print(f"charged images (strength ≥ {VISIBLE_STRENGTH}) detected, by kind:")
    for kind in KINDS:
        sub = [f for k, f in charged if k == kind]
        print(f"  {kind:11s} {sum(sub) / len(sub):.3f} ({len(sub)} images)")
    n = sum(f for _, f in charged)
    print(f"  all kinds   {n / len(charged):.3f} ({len(charged)} images)")
    if args.accuracy_recipe:
        _accuracy_recipe(tuple(args.recipe_seeds))


def _accuracy_recipe(seeds: tuple[int, ...] = RECIPE_SEEDS) -> None:
    import tests.micrograph.test_accuracy as recipe

    clean, charged = [], []
    for seed in seeds:
        recipe.SEED = seed  # the recipe draws everything from this seed
        for kind, p in recipe._build():
            spec = p.pop("charging", None)
            (charged if kind == "charged" else clean).append(_flagged(p, spec))
    print(f"accuracy recipe, seeds {seeds}: clean flagged {sum(clean)}/{len(clean)}, ", end="")
    print(f"charged detected {sum(charged)}/{len(charged)}")


if __name__ == "__main__":
    main()

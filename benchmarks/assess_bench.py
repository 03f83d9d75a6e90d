"""Benchmark: ``assess`` on full-size micrographs, beside scikit-image's ``blur_effect``.

Prints, for 2048 × 1536 16-bit synthetic micrographs (seeded, σ 0.7–7 px log-uniform, doses
40–1000 e/px, all scene kinds): the median and worst seconds per image and the peak memory of
``assess``, on one core; and for ``skimage.measure.blur_effect`` (Crété-Roffet et al., "The blur
effect: perception and estimation with a new no-reference perceptual blur metric", SPIE 2007),
the general-purpose baseline, its time on the same images. Both are ranked against the true
probe σ (Spearman). Targets from the issue: ≤ 0.5 s and ≤ 400 MB per image, and a better rank
correlation than the baseline. It prints figures; it asserts nothing.

Usage: ``python benchmarks/assess_bench.py [--images N] [--seed S]``
"""

from __future__ import annotations

import os

# one core: keep BLAS/FFT thread pools to a single thread, set before numpy is imported
for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse  # noqa: E402
import math  # noqa: E402
import resource  # noqa: E402
import statistics  # noqa: E402
import sys  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402
import tracemalloc  # noqa: E402
from concurrent.futures import ProcessPoolExecutor  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402
from scipy import stats  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from facility.micrograph.assess import assess  # noqa: E402
from facility.micrograph.charging import measure_charging  # noqa: E402
from facility.micrograph.synth import SCENES, make_micrograph  # noqa: E402

SHAPE = (1536, 2048)  # rows × columns: 2048 × 1536 pixels


def _pin_to_one_core() -> str:
    try:
        cpu = min(os.sched_getaffinity(0))
        os.sched_setaffinity(0, {cpu})
        return f"pinned to CPU {cpu}"
    except (AttributeError, OSError):
        return "not pinned (no sched_setaffinity)"


def _generate(kwargs: dict) -> np.ndarray:
    return make_micrograph(**kwargs).image


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--images", type=int, default=12)
    parser.add_argument("--seed", type=int, default=2026)
    args = parser.parse_args()
    pin = _pin_to_one_core()

    from skimage.measure import blur_effect

    rng = np.random.default_rng(args.seed)
    n = args.images
    # σ stratified over 0.7–7 px on a log scale, in random order
    sigmas = np.exp(np.log(0.7) + (np.arange(n) + rng.random(n)) / n * np.log(10.0))
    rng.shuffle(sigmas)
    scenes = sorted(SCENES)
    jobs = [
        {
            "seed": args.seed + i,
            "shape": SHAPE,
            "scene": scenes[i % len(scenes)],
            "sigma_px": float(sigmas[i]),
            "dose": math.exp(rng.uniform(math.log(40.0), math.log(1000.0))),
            "bit_depth": 16,
            "offset": float(rng.uniform(0.0, 0.15)),
            "gain": float(rng.uniform(0.6, 1.3)),
        }
        for i in range(n)
    ]
    rows = []
    charging_cpu: list[float] = []
    print(f"assess benchmark: {n} images of {SHAPE[1]}x{SHAPE[0]} px, 16-bit; {pin}")
    print("(images are made in a child process, so this process's memory is the analysis')")
    rss_start = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0  # kB on Linux
    with tempfile.TemporaryDirectory() as tmp, ProcessPoolExecutor(max_workers=1) as pool:
        for i, job in enumerate(jobs):
            # made one at a time, so the generator never competes with the timed analysis
            image = pool.submit(_generate, job).result()
            np.save(Path(tmp) / f"{i}.npy", image)
            tracemalloc.start()
            c0, t0 = time.process_time(), time.perf_counter()
            result = assess(image)
            wall, cpu = time.perf_counter() - t0, time.process_time() - c0
            peak = tracemalloc.get_traced_memory()[1] / 1e6
            tracemalloc.stop()
            # the charging part alone, as CPU time (its own budget: 0.15 s a frame)
            c1 = time.process_time()
            measure_charging(image, bit_depth=16)
            charging_cpu.append(time.process_time() - c1)
            est = result.sigma_px if result.sigma_px is not None else float("nan")
            rows.append([job["sigma_px"], est, wall, cpu, peak])
            del image, result
        rss_assess = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
        # the baseline afterwards, on the same images, so it cannot raise the figures above
        for i, row in enumerate(rows):
            image = np.load(Path(tmp) / f"{i}.npy").astype(np.float64)
            t0 = time.perf_counter()
            row += [float(blur_effect(image)), time.perf_counter() - t0]

    print(
        f"{'scene':<10}{'sigma':>7}{'dose':>7}{'est':>8}{'wall s':>8}{'cpu s':>7}{'peak MB':>9}"
        f"{'blur_eff':>10}{'b_e s':>7}"
    )
    for job, (sigma, est, wall, cpu, peak, base, t_base) in zip(jobs, rows, strict=True):
        print(
            f"{job['scene']:<10}{sigma:7.2f}{job['dose']:7.0f}{est:8.2f}{wall:8.3f}{cpu:7.3f}"
            f"{peak:9.1f}{base:10.4f}{t_base:7.3f}"
        )

    true = [r[0] for r in rows]
    est = [r[1] for r in rows]
    wall = [r[2] for r in rows]
    cpu = [r[3] for r in rows]
    t_b = [r[6] for r in rows]
    within = [abs(e / s - 1.0) <= 0.25 for s, e in zip(true, est, strict=True)]
    rho_ours = stats.spearmanr(true, est).statistic
    rho_base = stats.spearmanr(true, [r[5] for r in rows]).statistic
    load = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
    print()
    print(
        f"assess:      median {statistics.median(wall):.3f} s, worst {max(wall):.3f} s wall "
        f"(cpu median {statistics.median(cpu):.3f} s, worst {max(cpu):.3f} s); "
        f"peak traced memory {max(r[4] for r in rows):.1f} MB"
    )
    print(
        f"             of which charging: median {statistics.median(charging_cpu):.3f} s, "
        f"worst {max(charging_cpu):.3f} s cpu"
    )
    print(
        f"             process max RSS {rss_assess:.0f} MB after the analyses "
        f"({rss_start:.0f} MB before: interpreter and libraries)"
    )
    print(
        f"             Spearman with true sigma {rho_ours:.3f}; within +-25 % of the true "
        f"20-80 % rise: {sum(within)}/{len(within)}"
    )
    print(
        f"blur_effect: median {statistics.median(t_b):.3f} s, worst {max(t_b):.3f} s wall, "
        f"Spearman with true sigma {rho_base:.3f}"
    )
    print(f"load average during the run: {load:.2f} (other processes share the machine)")
    print("targets: <= 0.5 s and <= 400 MB per image; rank correlation above the baseline's")


if __name__ == "__main__":
    main()

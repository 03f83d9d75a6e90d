"""Specimen-like scenes: noise-free secondary-electron yield maps before the probe blur.

Every scene is drawn at ``px`` samples per output pixel (supersampled), so its edges are sharp at
the output sampling; lengths below are given in output pixels. Brightness is relative yield (the
support or matrix ≈ 1). Which contrast each scene models is written in its docstring; none of them
is shaped to suit a particular estimator — the parameters are drawn at random from ranges that
look like SEM micrographs at medium to high magnification.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Callable

import numpy as np

from .fields import band_field, gaussian_smooth_pair, power_law_field, segment_distance


def _loguniform(rng: np.random.Generator, lo: float, hi: float) -> float:
    return float(math.exp(rng.uniform(math.log(lo), math.log(hi))))


def particles(shape: tuple[int, int], px: float, rng: np.random.Generator) -> np.ndarray:
    """Nanoparticles on a textured support film.

    Models: a carbon-like support film with self-affine roughness (power-law texture, exponent
    2.4–3.4) carrying round to oval particles (radius 2.5 px up to 15–45 px, log-uniform, i.e. many
    small and a few large), brighter than the film (material contrast) with a bright rim inside the
    boundary (the secondary-electron edge effect, decaying over 0.8–2.5 px) and a mild one-sided
    topographic shading. Particles may overlap; later ones lie on top.
    """
    ny, nx = shape
    tex = power_law_field(shape, rng, beta=rng.uniform(2.4, 3.4), corr_px=rng.uniform(20, 80) * px)
    out = 1.0 + rng.uniform(0.04, 0.12) * tex
    coverage = rng.uniform(0.12, 0.35)
    r_max = rng.uniform(15.0, 45.0)
    shade_dir = rng.uniform(0, 2 * math.pi)
    covered = 0.0
    target = coverage * ny * nx
    while covered < target:
        r = _loguniform(rng, 2.5, r_max) * px
        aspect = rng.uniform(1.0, 1.4)
        a, b = r * math.sqrt(aspect), r / math.sqrt(aspect)
        phi = rng.uniform(0, math.pi)
        cy, cx = rng.uniform(-a, ny + a), rng.uniform(-a, nx + a)
        y0, y1 = max(int(cy - a - 2), 0), min(int(cy + a + 3), ny)
        x0, x1 = max(int(cx - a - 2), 0), min(int(cx + a + 3), nx)
        covered += math.pi * a * b
        if y1 <= y0 or x1 <= x0:
            continue
        yy, xx = np.mgrid[y0:y1, x0:x1].astype(np.float32)
        dy, dx = yy - cy, xx - cx
        u = dx * math.cos(phi) + dy * math.sin(phi)
        v = -dx * math.sin(phi) + dy * math.cos(phi)
        rho = np.sqrt((u / a) ** 2 + (v / b) ** 2)
        inside = rho < 1.0
        if not inside.any():
            continue
        depth = (1.0 - rho) * b  # distance to the boundary, approximately, along the short axis
        body = rng.uniform(1.3, 2.0)
        rim = rng.uniform(0.2, 0.9) * np.exp(-depth / (rng.uniform(0.8, 2.5) * px))
        shade = 1.0 + 0.15 * (dx * math.cos(shade_dir) + dy * math.sin(shade_dir)) / a
        val = body * shade + rim
        block = out[y0:y1, x0:x1]
        block[inside] = val[inside]
    return out


def fibres(shape: tuple[int, int], px: float, rng: np.random.Generator) -> np.ndarray:
    """A mat of fibres (e.g. electrospun polymer or cellulose) over a darker substrate.

    Models: fibres of half-width 1.5–12 px following gently curving paths, oriented anywhere from
    random to strongly aligned (von Mises spread), each a cylinder whose secondary-electron yield
    rises towards its edges as 1/cos of the surface tilt (capped, so the edges are bright lines);
    the substrate is darker with a rough texture. Later fibres lie on top.
    """
    ny, nx = shape
    tex = power_law_field(shape, rng, beta=rng.uniform(2.2, 3.2), corr_px=rng.uniform(10, 60) * px)
    out = rng.uniform(0.35, 0.6) + rng.uniform(0.03, 0.1) * tex
    theta0 = rng.uniform(0, math.pi)
    kappa = rng.uniform(0.0, 4.0)
    coverage = rng.uniform(0.25, 0.6)
    covered = 0.0
    seg = 24.0 * px
    margin = 4.0 * px
    while covered < coverage * ny * nx:
        h = _loguniform(rng, 1.5, 12.0) * px
        theta = theta0 + 0.5 * rng.vonmises(0.0, kappa)  # axial spread about theta0
        start = (rng.uniform(0, ny), rng.uniform(0, nx))
        points = [start]
        for sign in (1.0, -1.0):
            y, x, t = start[0], start[1], theta
            path = []
            while -margin - h < y < ny + margin + h and -margin - h < x < nx + margin + h:
                t += rng.normal(0.0, 0.04)
                y, x = y + sign * seg * math.sin(t), x + sign * seg * math.cos(t)
                path.append((y, x))
            points = points + path if sign > 0 else path[::-1] + points
        pts = np.array(points)
        y0 = max(int(pts[:, 0].min() - h - 2), 0)
        y1 = min(int(pts[:, 0].max() + h + 3), ny)
        x0 = max(int(pts[:, 1].min() - h - 2), 0)
        x1 = min(int(pts[:, 1].max() + h + 3), nx)
        if y1 <= y0 or x1 <= x0:
            continue
        dist = np.full((y1 - y0, x1 - x0), np.inf, dtype=np.float32)
        for p, q in itertools.pairwise(points):
            sy0 = max(int(min(p[0], q[0]) - h - 1), y0)
            sy1 = min(int(max(p[0], q[0]) + h + 2), y1)
            sx0 = max(int(min(p[1], q[1]) - h - 1), x0)
            sx1 = min(int(max(p[1], q[1]) + h + 2), x1)
            if sy1 <= sy0 or sx1 <= sx0:
                continue
            yy, xx = np.mgrid[sy0:sy1, sx0:sx1].astype(np.float32)
            d = segment_distance(yy, xx, p, q)
            sub = dist[sy0 - y0 : sy1 - y0, sx0 - x0 : sx1 - x0]
            np.minimum(sub, d, out=sub)
        inside = dist < h
        t_rel = np.minimum(dist[inside] / h, 0.999)
        cap = rng.uniform(1.6, 3.0)
        val = rng.uniform(0.9, 1.3) * np.minimum(1.0 / np.sqrt(1.0 - t_rel * t_rel), cap)
        block = out[y0:y1, x0:x1]
        block[inside] = val
        covered += float(inside.sum())
    return out


def porous(shape: tuple[int, int], px: float, rng: np.random.Generator) -> np.ndarray:
    """A porous surface (e.g. anodised or sintered material, a membrane or a foam cross-section).

    Models: pores as the low level set of a correlated random field (two size scales, 6–30 px and
    2–4× that), so they are irregular and interconnected; pores are dark (few secondary electrons
    escape) with their walls fading into the dark floor over 2–6 px; the matrix is rough
    (power-law texture) and brightens towards the pore mouths (edge effect, 0.8–3 px). Both
    fall-offs are the share of a Gaussian interaction volume that lies beyond the boundary.
    """
    scale = rng.uniform(6.0, 30.0) * px
    g = band_field(shape, rng, scale_px=scale)
    g += rng.uniform(0.3, 0.7) * band_field(shape, rng, scale_px=scale * rng.uniform(2.0, 4.0))
    step = max(1, shape[0] // 256), max(1, shape[1] // 256)
    pores = g < np.quantile(g[:: step[0], :: step[1]], rng.uniform(0.15, 0.45))
    tex = power_law_field(shape, rng, beta=rng.uniform(2.4, 3.4), corr_px=rng.uniform(10, 60) * px)
    out = 1.0 + rng.uniform(0.04, 0.12) * tex
    # 2·(G ∗ mask) is 1 on a straight boundary and falls off like erfc away from it
    rim_w, wall_w = rng.uniform(0.8, 3.0) * px, rng.uniform(2.0, 6.0) * px
    near_pore, pore_blur = gaussian_smooth_pair(pores, rim_w, wall_w)
    out += rng.uniform(0.3, 1.0) * np.minimum(2.0 * near_pore, 1.0)
    wall = rng.uniform(0.15, 0.4) + 0.35 * np.minimum(2.0 * (1.0 - pore_blur), 1.0)
    return np.where(pores, wall, out).astype(np.float32)


def edges(shape: tuple[int, int], px: float, rng: np.random.Generator) -> np.ndarray:
    """Straight edges: a patterned or cleaved surface (lithographic features, terraces, grains).

    Models: piecewise-uniform regions cut by 4–12 straight boundaries, half of them near the scan
    axes as in lithographic layouts (so strong horizontal edges occur), each boundary raising the
    yield on one side by 0.15–0.5; optionally a lines-and-spaces grating block; a faint rough
    texture on top.
    """
    ny, nx = shape
    tex = power_law_field(shape, rng, beta=rng.uniform(2.4, 3.4), corr_px=rng.uniform(10, 60) * px)
    out = 1.0 + rng.uniform(0.02, 0.06) * tex
    yy = np.arange(ny, dtype=np.float32)[:, None]
    xx = np.arange(nx, dtype=np.float32)[None, :]
    for _ in range(int(rng.integers(4, 13))):
        if rng.random() < 0.5:
            ang = rng.choice([0.0, math.pi / 2]) + rng.normal(0.0, 0.01)
        else:
            ang = rng.uniform(0, math.pi)
        y0, x0 = rng.uniform(0, ny), rng.uniform(0, nx)
        side = ((xx - x0) * math.sin(ang) - (yy - y0) * math.cos(ang)) > 0
        out += rng.choice([-1.0, 1.0]) * rng.uniform(0.15, 0.5) * side
    if rng.random() < 0.5:
        period = rng.uniform(8.0, 40.0) * px
        by0, bx0 = int(rng.uniform(0, ny * 0.6)), int(rng.uniform(0, nx * 0.6))
        by1, bx1 = by0 + int(ny * rng.uniform(0.2, 0.4)), bx0 + int(nx * rng.uniform(0.2, 0.4))
        block = out[by0:by1, bx0:bx1]
        coord = yy[by0:by1] if rng.random() < 0.5 else xx[:, bx0:bx1]
        bars = (np.mod(coord + rng.uniform(0, period), period) < period / 2).astype(np.float32)
        block += rng.uniform(0.3, 0.7) * bars
    return np.maximum(out, 0.1)


SCENES: dict[str, Callable[[tuple[int, int], float, np.random.Generator], np.ndarray]] = {
    "particles": particles,
    "fibres": fibres,
    "porous": porous,
    "edges": edges,
}

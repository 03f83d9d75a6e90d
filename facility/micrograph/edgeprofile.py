"""Cross-checks of the probe size on strong edges in real space.

Two classic measurements, both on the same automatically chosen edges:

* **edge profile** — the pixels of a short strip across each edge are fitted with a step seen
  through a Gaussian probe, b + C·Φ((t − t₀)/σₙ), by batched Gauss–Newton (the line-scan
  edge-sharpness idea behind ASTM E986, applied to every strong edge instead of a hand-picked
  one). The pixel values are used as sampled, without interpolation, so no resampling blur enters.
* **contrast-to-gradient** (Ishitani & Sato, J. Electron Microsc. 51 (2002) 369): the step
  height divided by the steepest slope is √(2π)·σ for a Gaussian-blurred step; the slope is taken
  from a Gaussian-derivative filter of scale s, whose own contribution is removed in quadrature.

Both assume ideal steps, so specimen detail finer than the probe (bright edge rims, thin
coatings) makes them read *sharper* than the probe; :mod:`.sharpness` therefore combines them
with the spectral estimate only with a systematic allowance. Edges are found by non-maximum
suppression of the gradient magnitude (Canny 1986), one per block so that strips do not overlap,
and only well above the noise. :func:`fit_edge_shape` turns the per-edge widths into the probe
covariance, since an edge with normal n is blurred by σₙ² = nᵀΣn.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy import ndimage, optimize, special

from .physics import FULL_CONTRAST_PER_SIGMA

SQRT2 = math.sqrt(2.0)
INV_SQRT_2PI = 1.0 / math.sqrt(2.0 * math.pi)
STRIP_HALF_WIDTH = 2.0  # px along the edge: short enough that curved edges are still straight


@dataclass(frozen=True)
class EdgeCheck:
    """Medians over the accepted edges (σ in px); ``edges`` is how many were accepted.

    The per-edge arrays give the direction of each edge normal (from +x towards +y), the fitted
    σ across the edge and the standard error of its logarithm.
    """

    edges: int
    candidates: int
    profile_sigma_px: float
    profile_spread: float  # median absolute deviation of log σ over the edges
    cg_sigma_px: float
    normal_rad: np.ndarray = field(repr=False)
    sigma_px: np.ndarray = field(repr=False)
    se_log_sigma: np.ndarray = field(repr=False)


@dataclass(frozen=True)
class EdgeShape:
    """Probe shape from the edges in the parameters of :mod:`.spectral` (log σ, u, v).

    ``information`` is the inverse covariance of (log σ, u, v); directions the edges do not
    sample have (near) zero information.
    """

    params: np.ndarray
    information: np.ndarray


def _edge_points(
    x: np.ndarray, scale: float, noise_var: float, half: int, limit: int
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    gx = ndimage.gaussian_filter(x, scale, order=(0, 1))
    gy = ndimage.gaussian_filter(x, scale, order=(1, 0))
    mag = np.hypot(gx, gy)
    # noise s.d. of one Gaussian-derivative component for white noise: √(v / (8π s⁴))
    eta = math.sqrt(noise_var / (8.0 * math.pi * scale**4))
    ang = np.arctan2(gy, gx)
    # non-maximum suppression along the gradient, direction quantised to 45° (as in Canny 1986)
    octant = np.rint(ang * (4.0 / math.pi)).astype(np.int8) % 4
    pad = np.pad(mag, 1, mode="edge")
    ny, nx = x.shape
    peak = np.zeros(x.shape, dtype=bool)
    for k, (dy, dx) in enumerate(((0, 1), (1, 1), (1, 0), (1, -1))):
        fwd = pad[1 + dy : 1 + dy + ny, 1 + dx : 1 + dx + nx]
        bwd = pad[1 - dy : 1 - dy + ny, 1 - dx : 1 - dx + nx]
        peak |= (octant == k) & (mag >= fwd) & (mag >= bwd)
    peak &= mag > 6.0 * eta
    m = half + 1
    peak[:m], peak[-m:], peak[:, :m], peak[:, -m:] = False, False, False, False
    block = max(6, half)
    by, bx = ny // block, nx // block
    if by == 0 or bx == 0:
        empty = np.zeros(0, dtype=np.intp)
        return empty, empty, np.zeros(0), mag
    cand = np.where(peak, mag, 0.0)[: by * block, : bx * block]
    cand = cand.reshape(by, block, bx, block).transpose(0, 2, 1, 3).reshape(by, bx, -1)
    arg = cand.argmax(-1)
    val = np.take_along_axis(cand, arg[..., None], -1)[..., 0]
    sel = val > 0
    iy = (np.arange(by)[:, None] * block + arg // block)[sel]
    ix = (np.arange(bx)[None, :] * block + arg % block)[sel]
    order = np.argsort(-mag[iy, ix])[:limit]
    iy, ix = iy[order], ix[order]
    return iy, ix, ang[iy, ix], mag


def check_edges(
    image: np.ndarray, sigma_guess: float, noise_var: float, *, max_edges: int = 120
) -> EdgeCheck | None:
    """Fit edge profiles and contrast-to-gradient on the strongest edges; None if too few."""
    x = np.asarray(image, dtype=np.float32)
    sigma_guess = float(np.clip(sigma_guess, 0.5, 15.0))
    noise_var = max(float(noise_var), 1e-12)
    scale = max(1.0, 0.7 * sigma_guess)
    half = math.ceil(3.0 * sigma_guess + 3.0)
    iy, ix, ang, mag = _edge_points(x, scale, noise_var, half, max_edges)
    k = iy.size
    if k < 5:
        return None
    oy, ox = np.mgrid[-half : half + 1, -half : half + 1]
    oy, ox = oy.ravel()[None, :], ox.ravel()[None, :]
    c, s = np.cos(ang)[:, None], np.sin(ang)[:, None]
    t_all = ox * c + oy * s  # across the edge, along the gradient
    u_all = -ox * s + oy * c  # along the edge
    inside = (np.abs(u_all) <= STRIP_HALF_WIDTH) & (np.abs(t_all) <= half)
    # keep only the strip pixels (padded to the longest strip, padding weighted 0)
    width = int(inside.sum(1).max())
    pick = np.argsort(~inside, axis=1, kind="stable")[:, :width]
    w = np.take_along_axis(inside, pick, 1).astype(np.float64)
    t = np.take_along_axis(t_all, pick, 1)
    values = x[iy[:, None] + oy[0][pick], ix[:, None] + ox[0][pick]]
    wsum_lo = np.maximum(np.sum(w * (t < -1), 1), 1)
    wsum_hi = np.maximum(np.sum(w * (t > 1), 1), 1)
    lo = np.sum(values * w * (t < -1), 1) / wsum_lo
    hi = np.sum(values * w * (t > 1), 1) / wsum_hi
    p = np.stack([lo, hi - lo, np.zeros(k), np.full(k, math.log(sigma_guess))], 1)
    eye = np.eye(4)
    for _ in range(8):
        b, amp, t0, ls = p.T
        sg = np.exp(ls)[:, None]
        z = (t - t0[:, None]) / sg
        cdf = 0.5 * special.erfc(-z / SQRT2)
        pdf = np.exp(-0.5 * z * z) * INV_SQRT_2PI
        r = (values - b[:, None] - amp[:, None] * cdf) * w
        jac = np.stack([w, w * cdf, -w * amp[:, None] * pdf / sg, -w * amp[:, None] * pdf * z], -1)
        jac_t = jac.transpose(0, 2, 1)
        jtj = jac_t @ jac
        jtr = (jac_t @ r[:, :, None])[..., 0]
        damp = 1e-3 * np.einsum("kii->ki", jtj)[:, :, None] * eye + 1e-12 * eye
        step = np.linalg.solve(jtj + damp, jtr[:, :, None])[..., 0]
        step[:, 2] = np.clip(step[:, 2], -1.0, 1.0)
        step[:, 3] = np.clip(step[:, 3], -0.5, 0.5)
        p += step
        p[:, 3] = np.clip(p[:, 3], math.log(0.1), math.log(30.0))
    b, amp, t0, ls = p.T
    sig = np.exp(ls)
    z = (t - t0[:, None]) / sig[:, None]
    resid = (values - b[:, None] - amp[:, None] * 0.5 * special.erfc(-z / SQRT2)) * w
    rms = np.sqrt(np.sum(resid**2, 1) / np.sum(w, 1))
    noise_sd = math.sqrt(noise_var)
    # standard error of log σ per edge from the Gauss–Newton curvature and the fit residual
    jtj_inv = np.linalg.inv(jtj + 1e-12 * eye)
    se_log = np.sqrt(np.maximum(jtj_inv[:, 3, 3], 0.0)) * rms
    good = (
        (np.abs(t0) < 1.5)
        & (rms < 2.0 * noise_sd)
        & (np.abs(amp) > 3.0 * noise_sd)
        & (se_log < 0.5)
        & (sig > 0.11)
        & (sig < 29.0)
    )
    if good.sum() < 5:
        return None
    log_sig = np.log(sig[good])
    med = float(np.median(log_sig))
    # contrast-to-gradient: |C| / (√(2π)·g_s) = √(σ² + s²), the filter's s removed in quadrature
    width = np.abs(amp[good]) / (
        FULL_CONTRAST_PER_SIGMA * np.maximum(mag[iy[good], ix[good]], 1e-12)
    )
    cg = np.sqrt(np.maximum(width**2 - scale**2, 0.0))
    return EdgeCheck(
        edges=int(good.sum()),
        candidates=int(k),
        profile_sigma_px=math.exp(med),
        profile_spread=float(np.median(np.abs(log_sig - med))),
        cg_sigma_px=float(np.median(cg)),
        normal_rad=ang[good],
        sigma_px=sig[good],
        se_log_sigma=se_log[good],
    )


def fit_edge_shape(check: EdgeCheck, *, scatter: float = 0.1) -> EdgeShape | None:
    """Fit the probe covariance to the per-edge σ across each edge normal n: σₙ² = nᵀΣn.

    With Σ = σ²·expm([[u, v], [v, −u]]) (as in :mod:`.spectral`), nᵀΣn = σ²(cosh ρ + sinh ρ/ρ ·
    (u cos 2θ + v sin 2θ)), ρ = √(u² + v²). Least squares in log σₙ, each edge weighted by its
    own standard error plus ``scatter`` for edge-to-edge differences of the specimen, with a
    Huber loss against stray edges. Returns None when the fit fails.
    """
    theta = check.normal_rad
    c2, s2 = np.cos(2.0 * theta), np.sin(2.0 * theta)
    y = np.log(check.sigma_px)
    wgt = 1.0 / np.sqrt(check.se_log_sigma**2 + scatter**2)

    def model(p: np.ndarray) -> np.ndarray:
        ls, u, v = p
        rho = math.hypot(u, v)
        k = math.sinh(rho) / rho if rho > 1e-8 else 1.0
        inner = np.maximum(math.cosh(rho) + k * (u * c2 + v * s2), 1e-12)
        return ls + 0.5 * np.log(inner)

    def fun(p: np.ndarray) -> np.ndarray:
        return (y - model(p)) * wgt

    start = np.array([float(np.median(y)), 0.0, 0.0])
    try:
        res = optimize.least_squares(
            fun, start, loss="huber", f_scale=2.0, bounds=([-3.0, -3.0, -3.0], [4.0, 3.0, 3.0])
        )
    except ValueError:
        return None
    dof = max(y.size - 3, 1)
    red = max(float(np.sum(res.fun**2)) / dof, 1.0)
    return EdgeShape(params=res.x, information=(res.jac.T @ res.jac) / red)

"""Probe size and shape from the image power spectrum.

Method (after Brostrøm & Mølhave, "Spatial image resolution assessment by Fourier analysis",
Microsc. Microanal. 2022 — SIRAF): a specimen made of sharp-edged regions seen through a Gaussian
probe of covariance Σ has a power spectrum

    P(f) = K · |f|^(−α) · exp(−4π² fᵀΣf) + N,

the power law being the specimen (α ≈ 3 for sharp boundaries, Porod's law for the radially
averaged 2-D spectrum; ≈ 2 for natural scenes), the exponential the squared probe transfer
function and N the white counting noise. Fitting Σ to the spectrum measures the probe, not the
dose: more noise raises N but leaves the roll-off where it is. Our implementation choices:

* the image (or each tile of a large one, Bartlett-averaged) is replaced by its periodic
  component (Moisan, "Periodic plus smooth image decomposition", J. Math. Imaging Vis. 39 (2011)
  161) instead of being windowed, which removes the border cross without smearing the spectrum;
* the periodogram is averaged in cells (geometric rings × angular sectors) and fitted with the
  Whittle likelihood of averaged periodogram values (deviance residuals of a Gamma law), so cells
  with few coefficients are weighted correctly; a soft-L1 loss limits cells that the specimen
  makes stray from a power law (periodic patterns, single bright lines of the spectrum);
* the sector amplitudes K_s are free, because specimens are rarely isotropic (aligned fibres,
  straight edges), while the exponent α and the probe Σ are shared; Σ is written as
  σ²·expm([[u, v], [v, −u]]), so σ is the geometric-mean probe size, e^√(u²+v²) the ratio
  σ_major/σ_minor and ½·atan2(v, u) the direction of the major axis;
* weak priors keep the fit defined where the data say little: α ~ N(2.75, 0.75) (between the
  two regimes above) and u, v ~ N(0, 0.8) (anisotropy up to a factor ~2 at one s.d.);
* the column of coefficients with no variation along the scan lines is left out, since whole-line
  brightness changes (charging, unstable detectors) put their power there.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np
from scipy import fft, optimize

FOUR_PI2 = 4.0 * math.pi**2
# Weak priors: scene exponent (Porod 3 … natural scenes 2), and the log ratio of the probe axes.
ALPHA_PRIOR = (2.75, 0.75)
ANISOTROPY_PRIOR_SD = 0.8
SIGMA_BOUNDS = (0.05, 40.0)
ALPHA_BOUNDS = (0.5, 6.0)
LOSS_SCALE = 3.0  # soft-L1 scale, in deviance units: cells off the model by more count less
# Cells: 12 sectors of 15° and 60 geometric rings (8 % wide). The model is evaluated at each cell's
# mean frequency moments; the exponent varies inside a cell, and by Jensen's inequality the mean
# of exp is above exp of the mean, which biases σ low — by ≈ 2–5 % at this cell size (checked on
# fields with an exact model spectrum), against ≈ 8 % with 8 × 40 cells.
SECTORS = 12
RINGS = 60
TILE_MAX = 1024  # larger images are Bartlett-averaged over tiles of at most this size


@dataclass(frozen=True)
class SpectrumCells:
    """Periodogram averaged in ring × sector cells (one entry per non-empty cell)."""

    count: np.ndarray  # coefficients per cell
    power: np.ndarray  # mean periodogram value (image units² per pixel)
    q: np.ndarray  # mean |f| (cycles/px)
    fxx: np.ndarray  # mean fx² — enough to evaluate fᵀΣf exactly on average
    fyy: np.ndarray
    fxy: np.ndarray
    ring: np.ndarray
    sector: np.ndarray
    sectors: int


@dataclass(frozen=True)
class SpectralFit:
    """Result of the model fit; σ values in pixels, angle of the major axis from +x towards +y."""

    sigma_px: float
    sigma_major_px: float
    sigma_minor_px: float
    angle_deg: float
    ratio: float
    alpha: float
    noise_power: float
    se_log_sigma: float
    se_log_ratio: float
    reduced_deviance: float
    isotropic_sigma_px: float
    signal_band_q: float  # highest frequency where the fitted specimen power exceeds the noise
    shape_params: np.ndarray = field(repr=False)  # (log σ, u, v)
    shape_covariance: np.ndarray = field(repr=False)  # their 3×3 covariance


@dataclass(frozen=True)
class ProbeShape:
    """σ (geometric mean), axes, ratio and major-axis angle of a probe given as (log σ, u, v)."""

    sigma_px: float
    sigma_major_px: float
    sigma_minor_px: float
    ratio: float
    angle_deg: float

    @classmethod
    def from_params(cls, params: np.ndarray) -> ProbeShape:
        ls, u, v = (float(x) for x in params)
        rho = math.hypot(u, v)
        sigma = math.exp(ls)
        return cls(
            sigma_px=sigma,
            sigma_major_px=sigma * math.exp(rho / 2),
            sigma_minor_px=sigma * math.exp(-rho / 2),
            ratio=math.exp(rho),
            angle_deg=(0.5 * math.degrees(math.atan2(v, u))) % 180.0,
        )


def periodic_spectrum(image: np.ndarray) -> np.ndarray:
    """Half-plane DFT of the periodic component of ``image`` (Moisan 2011).

    The smooth component's transform is known in closed form from the border jumps, so the
    periodic part costs one real FFT and two 1-D FFTs.
    """
    u = np.asarray(image, dtype=np.float32)
    u = u - np.float32(u.mean())
    ny, nx = u.shape
    spec = fft.rfft2(u, workers=1)
    a = (u[-1, :] - u[0, :]).astype(np.float64)  # jump across the top/bottom border, per column
    b = (u[:, -1] - u[:, 0]).astype(np.float64)  # jump across the left/right border, per row
    a_hat = fft.rfft(a)[None, :].astype(np.complex64)
    b_hat = fft.fft(b)[:, None].astype(np.complex64)
    one_ey, one_ex, inv_den = _smooth_kernels(ny, nx)
    # transform of the smooth component: (â(kx)(1 − e_y) + b̂(ky)(1 − e_x)) / (2cos + 2cos − 4)
    smooth = a_hat * one_ey
    smooth += b_hat * one_ex
    smooth *= inv_den
    spec -= smooth
    return spec


@lru_cache(maxsize=4)
def _smooth_kernels(ny: int, nx: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    ky = np.arange(ny)[:, None]
    kx = np.arange(nx // 2 + 1)[None, :]
    one_ey = (1.0 - np.exp(2j * math.pi * ky / ny)).astype(np.complex64)
    one_ex = (1.0 - np.exp(2j * math.pi * kx / nx)).astype(np.complex64)
    den = 2.0 * np.cos(2.0 * math.pi * ky / ny) + 2.0 * np.cos(2.0 * math.pi * kx / nx) - 4.0
    den[0, 0] = 1.0
    inv = (1.0 / den).astype(np.float32)
    inv[0, 0] = 0.0
    return one_ey, one_ex, inv


@lru_cache(maxsize=4)
def _cell_geometry(ny: int, nx: int, sectors: int, rings: int) -> tuple[np.ndarray, ...]:
    fy = fft.fftfreq(ny).astype(np.float32)[:, None]
    fx = fft.rfftfreq(nx).astype(np.float32)[None, :]
    q = np.sqrt(fx * fx + fy * fy)
    length = min(ny, nx)
    q_lo, q_hi = 2.0 / length, 0.5 * math.sqrt(2.0)
    edges = [q_lo]
    for e in np.geomspace(q_lo, q_hi, rings + 1)[1:]:
        if e - edges[-1] >= 1.0 / length:  # no ring narrower than one frequency step
            edges.append(float(e))
    edges_arr = np.asarray(edges, dtype=np.float32)
    ring = np.searchsorted(edges_arr, q.ravel(), side="right").reshape(q.shape) - 1
    # sectors centred on 0°, 180°/n, …: lines of power along the axes fall inside one sector
    phi = np.arctan2(np.broadcast_to(fy, q.shape), np.broadcast_to(fx, q.shape))
    phi += np.float32(math.pi / (2 * sectors))
    phi %= np.float32(math.pi)
    sector = np.minimum((phi * np.float32(sectors / math.pi)).astype(np.int32), sectors - 1)
    keep = (ring >= 0) & (ring < len(edges_arr) - 1) & (np.abs(fx * nx) > 1.5)
    cell = (ring * sectors + sector)[keep]
    n_cells = (len(edges_arr) - 1) * sectors
    count = np.bincount(cell, minlength=n_cells).astype(np.float64)
    fxb = np.broadcast_to(fx, q.shape)[keep]
    fyb = np.broadcast_to(fy, q.shape)[keep]
    sums = [
        np.bincount(cell, weights=w, minlength=n_cells)
        for w in (q[keep], fxb * fxb, fyb * fyb, fxb * fyb)
    ]
    flat_keep = np.flatnonzero(keep.ravel()).astype(np.int32)
    return (flat_keep, cell.astype(np.int32), count, *sums)


def _tiles(ny: int, nx: int, tile_max: int) -> tuple[int, int, int, int]:
    """Tile grid for Bartlett averaging: (rows of tiles, columns of tiles, tile height, width)."""
    ty, tx = math.ceil(ny / tile_max), math.ceil(nx / tile_max)
    return ty, tx, ny // ty, nx // tx


def spectrum_cells(
    image: np.ndarray, *, sectors: int = SECTORS, rings: int = RINGS, tile_max: int = TILE_MAX
) -> SpectrumCells:
    """Average the periodogram of ``image`` over rings (geometric) and angular sectors.

    Images larger than ``tile_max`` are cut into equal non-overlapping tiles whose periodograms
    (each of its periodic component) are averaged (Bartlett's method): the same statistics at a
    fraction of the binning work, with frequency steps of 1/``tile_max`` — fine enough for σ up to
    tens of pixels. Power is normalised per pixel, so white noise of variance v gives a flat
    spectrum at v.
    """
    ny, nx = image.shape
    n_ty, n_tx, th, tw = _tiles(ny, nx, tile_max)
    power = np.zeros((th, tw // 2 + 1), dtype=np.float32)
    for i in range(n_ty):
        for j in range(n_tx):
            spec = periodic_spectrum(image[i * th : (i + 1) * th, j * tw : (j + 1) * tw])
            power += spec.real * spec.real + spec.imag * spec.imag
    power = power.ravel()
    flat_keep, cell, count, sq, sxx, syy, sxy = _cell_geometry(th, tw, sectors, rings)
    psum = np.bincount(cell, weights=power[flat_keep], minlength=count.size)
    used = (count > 0) & (psum > 0)
    c = count[used] * (n_ty * n_tx)
    index = np.flatnonzero(used)
    geo = count[used]
    return SpectrumCells(
        count=c,
        power=np.maximum(psum[used] / (c * float(th * tw)), 1e-30),
        q=sq[used] / geo,
        fxx=sxx[used] / geo,
        fyy=syy[used] / geo,
        fxy=sxy[used] / geo,
        ring=index // sectors,
        sector=index % sectors,
        sectors=sectors,
    )


def _deviance(
    power: np.ndarray, log_model: np.ndarray, count: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Signed deviance residuals of Gamma(count)-distributed cell means and d r / d log M."""
    x = np.exp(np.clip(np.log(power) - log_model, -690.0, 690.0))
    d = 2.0 * count * (x - 1.0 - np.log(x))
    r = np.sign(x - 1.0) * np.sqrt(np.maximum(d, 0.0))
    small = np.abs(x - 1.0) < 1e-6
    with np.errstate(divide="ignore", invalid="ignore"):
        drdm = np.where(small, -np.sqrt(count), -count * (x - 1.0) / r)
    return r, drdm


def _radial(cells: SpectrumCells) -> tuple[np.ndarray, ...]:
    nr = int(cells.ring.max()) + 1
    n = np.bincount(cells.ring, weights=cells.count, minlength=nr)
    used = n > 0

    def avg(v: np.ndarray) -> np.ndarray:
        return np.bincount(cells.ring, weights=v * cells.count, minlength=nr)[used] / n[used]

    return n[used], avg(cells.power), avg(cells.q), avg(cells.fxx + cells.fyy)


def _noise_start(q: np.ndarray, power: np.ndarray) -> float:
    high = q > 0.45
    return (
        math.log(float(np.median(power[high]))) if high.sum() >= 2 else math.log(float(power.min()))
    )


def fit_isotropic(cells: SpectrumCells) -> optimize.OptimizeResult:
    """Fit K q^−α exp(−4π²σ²q²) + N to the ring averages, from the best point of a σ profile."""
    n, power, q, q2 = _radial(cells)
    lq = np.log(q)
    a0, a_sd = ALPHA_PRIOR

    def fun(p: np.ndarray) -> np.ndarray:
        lk, al, ln, ls = p
        a = lk - al * lq - FOUR_PI2 * math.exp(2 * ls) * q2
        r, _ = _deviance(power, np.logaddexp(a, ln), n)
        return np.append(r, (al - a0) / a_sd)

    def jac(p: np.ndarray) -> np.ndarray:
        lk, al, ln, ls = p
        a = lk - al * lq - FOUR_PI2 * math.exp(2 * ls) * q2
        m = np.logaddexp(a, ln)
        _, drdm = _deviance(power, m, n)
        w = np.exp(a - m)
        j = np.empty((q.size + 1, 4))
        j[:-1, 0] = drdm * w
        j[:-1, 1] = drdm * w * -lq
        j[:-1, 2] = drdm * (1.0 - w)
        j[:-1, 3] = drdm * w * (-2.0 * FOUR_PI2 * math.exp(2 * ls) * q2)
        j[-1] = (0.0, 1.0 / a_sd, 0.0, 0.0)
        return j

    lo = [-np.inf, ALPHA_BOUNDS[0], -np.inf, math.log(SIGMA_BOUNDS[0])]
    hi = [np.inf, ALPHA_BOUNDS[1], np.inf, math.log(SIGMA_BOUNDS[1])]
    start = _profile_start(n, power, q, q2)
    return optimize.least_squares(
        fun, start, jac=jac, bounds=(lo, hi), loss="soft_l1", f_scale=LOSS_SCALE, x_scale="jac"
    )


def _profile_start(n: np.ndarray, power: np.ndarray, q: np.ndarray, q2: np.ndarray) -> np.ndarray:
    """Best start on a grid of σ: the other parameters fitted at each σ in one batch.

    The likelihood has local optima in σ (a power law with a steeper exponent mimics part of the
    Gaussian roll-off), so σ is profiled on a grid by a batched, damped Gauss–Newton with the
    same soft-L1 weighting (iteratively reweighted), and the best grid point starts the full fit.
    """
    lq = np.log(q)
    a0, a_sd = ALPHA_PRIOR
    grid = np.geomspace(0.3, 20.0, 16)
    g = grid.size
    low = q < max(0.05, float(q[min(3, q.size - 1)]))
    att = FOUR_PI2 * (grid[:, None] ** 2) * q2[None, :]  # (g, m) Gaussian exponent
    lk0 = math.log(float(np.mean(power[low] * q[low] ** 3))) + np.mean(att[:, low], axis=1)
    theta = np.stack([lk0, np.full(g, 3.0), np.full(g, _noise_start(q, power))], 1)
    eye = np.eye(3)
    lam = np.full(g, 1e-3)

    def evaluate(th: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        a = th[:, :1] - th[:, 1:2] * lq[None, :] - att
        m = np.logaddexp(a, th[:, 2:3])
        r, drdm = _deviance(power[None, :], m, n[None, :])
        w = np.exp(a - m)
        jac = np.stack([drdm * w, -drdm * w * lq[None, :], drdm * (1.0 - w)], -1)
        return r, jac, (th[:, 1] - a0) / a_sd

    def cost(r: np.ndarray, prior: np.ndarray) -> np.ndarray:
        z = (r / LOSS_SCALE) ** 2
        return np.sum(2.0 * (np.sqrt(1.0 + z) - 1.0), 1) * LOSS_SCALE**2 + prior**2

    for _ in range(15):
        r, jac, prior = evaluate(theta)
        wt = 1.0 / np.sqrt(1.0 + (r / LOSS_SCALE) ** 2)  # soft-L1 IRLS weights
        jtj = np.einsum("gmi,gm,gmj->gij", jac, wt, jac)
        jtr = np.einsum("gmi,gm,gm->gi", jac, wt, r)
        jtj[:, 1, 1] += 1.0 / a_sd**2
        jtr[:, 1] += prior / a_sd
        damp = lam[:, None, None] * np.einsum("gii->gi", jtj)[:, :, None] * eye + 1e-9 * eye
        step = -np.linalg.solve(jtj + damp, jtr[:, :, None])[..., 0]
        trial = theta + step
        trial[:, 1] = np.clip(trial[:, 1], *ALPHA_BOUNDS)
        better = cost(*evaluate(trial)[::2]) < cost(r, prior)
        theta = np.where(better[:, None], trial, theta)
        lam = np.where(better, lam / 3.0, lam * 4.0)  # Levenberg–Marquardt damping schedule
    r, _, prior = evaluate(theta)
    best = int(np.argmin(cost(r, prior)))
    lk, al, ln = theta[best]
    return np.array([lk, al, ln, math.log(grid[best])])


def fit_directional(cells: SpectrumCells, start: optimize.OptimizeResult) -> SpectralFit:
    """Fit per-sector amplitudes, shared α, N and the probe covariance Σ (see module docstring)."""
    ns = cells.sectors
    s = cells.sector
    lq = np.log(cells.q)
    t = cells.fxx + cells.fyy
    d = cells.fxx - cells.fyy
    x2 = 2.0 * cells.fxy
    a0, a_sd = ALPHA_PRIOR
    tau = ANISOTROPY_PRIOR_SD
    npts = cells.q.size

    def shape(u: float, v: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        rho = math.hypot(u, v)
        if rho < 1e-4:
            c, k, s_rho, dk_rho = (
                1.0 + rho * rho / 2,
                1.0 + rho * rho / 6,
                1.0 + rho * rho / 6,
                1 / 3 + rho * rho / 30,
            )
        else:
            c, k = math.cosh(rho), math.sinh(rho) / rho
            s_rho = math.sinh(rho) / rho
            dk_rho = (rho * math.cosh(rho) - math.sinh(rho)) / rho**3
        quad = c * t + k * (u * d + v * x2)
        g = s_rho * t + dk_rho * (u * d + v * x2)
        dq_du = u * g + k * d
        dq_dv = v * g + k * x2
        return quad, dq_du, dq_dv

    def parts(p: np.ndarray) -> tuple[np.ndarray, ...]:
        al, ln, ls, u, v = p[ns:]
        quad, dq_du, dq_dv = shape(u, v)
        s2 = math.exp(2 * ls)
        a = p[:ns][s] - al * lq - FOUR_PI2 * s2 * quad
        return a, np.logaddexp(a, ln), quad, dq_du, dq_dv, s2

    def fun(p: np.ndarray) -> np.ndarray:
        _, m, *_ = parts(p)
        r, _ = _deviance(cells.power, m, cells.count)
        return np.concatenate([r, [p[-2] / tau, p[-1] / tau, (p[ns] - a0) / a_sd]])

    def jac(p: np.ndarray) -> np.ndarray:
        a, m, quad, dq_du, dq_dv, s2 = parts(p)
        _, drdm = _deviance(cells.power, m, cells.count)
        w = np.exp(a - m)
        g = drdm * w
        j = np.zeros((npts + 3, ns + 5))
        j[np.arange(npts), s] = g
        j[:npts, ns] = -g * lq
        j[:npts, ns + 1] = drdm * (1.0 - w)
        j[:npts, ns + 2] = -g * 2.0 * FOUR_PI2 * s2 * quad
        j[:npts, ns + 3] = -g * FOUR_PI2 * s2 * dq_du
        j[:npts, ns + 4] = -g * FOUR_PI2 * s2 * dq_dv
        j[npts, ns + 3] = 1.0 / tau
        j[npts + 1, ns + 4] = 1.0 / tau
        j[npts + 2, ns] = 1.0 / a_sd
        return j

    lk, al, ln, ls = start.x
    p0 = np.concatenate([np.full(ns, lk), [al, ln, ls, 0.0, 0.0]])
    lo = np.concatenate(
        [np.full(ns, -np.inf), [ALPHA_BOUNDS[0], -np.inf, math.log(SIGMA_BOUNDS[0]), -3.0, -3.0]]
    )
    hi = np.concatenate(
        [np.full(ns, np.inf), [ALPHA_BOUNDS[1], np.inf, math.log(SIGMA_BOUNDS[1]), 3.0, 3.0]]
    )
    p0 = np.clip(p0, lo + 1e-9, hi - 1e-9)
    res = optimize.least_squares(
        fun, p0, jac=jac, bounds=(lo, hi), loss="soft_l1", f_scale=LOSS_SCALE, x_scale="jac"
    )
    al, ln, ls, u, v = res.x[ns:]
    rho = math.hypot(u, v)
    sigma = math.exp(ls)

    # Standard errors from the Gauss–Newton curvature, inflated by the reduced deviance because
    # real specimens deviate from a pure power law more than counting statistics alone would.
    dof = max(npts - res.x.size, 1)
    red = max(float(np.sum(res.fun[:npts] ** 2)) / dof, 1.0)
    jm = jac(res.x)
    try:
        cov = np.linalg.inv(jm.T @ jm) * red
    except np.linalg.LinAlgError:
        cov = np.eye(res.x.size) * 1e6
    shape_cov = cov[ns + 2 :, ns + 2 :]
    se_ls = math.sqrt(max(shape_cov[0, 0], 0.0))
    direction = np.array([u, v]) / rho if rho > 1e-6 else np.array([1.0, 0.0])
    se_rho = math.sqrt(max(float(direction @ shape_cov[1:, 1:] @ direction), 0.0))

    # highest frequency at which the fitted specimen term still exceeds the noise floor
    a, *_ = parts(res.x)
    above = cells.q[a > ln]
    band = float(above.max()) if above.size else 0.0
    return SpectralFit(
        sigma_px=sigma,
        sigma_major_px=sigma * math.exp(rho / 2),
        sigma_minor_px=sigma * math.exp(-rho / 2),
        angle_deg=(0.5 * math.degrees(math.atan2(v, u))) % 180.0,
        ratio=math.exp(rho),
        alpha=float(al),
        noise_power=math.exp(ln),
        se_log_sigma=se_ls,
        se_log_ratio=se_rho,
        reduced_deviance=red,
        isotropic_sigma_px=math.exp(start.x[3]),
        signal_band_q=band,
        shape_params=np.array([ls, u, v]),
        shape_covariance=shape_cov,
    )


def fit_spectrum(image: np.ndarray, *, sectors: int = SECTORS, rings: int = RINGS) -> SpectralFit:
    """Isotropic fit for a start, then the directional fit; see the module docstring."""
    cells = spectrum_cells(image, sectors=sectors, rings=rings)
    return fit_directional(cells, fit_isotropic(cells))

"""Small PNG previews of micrographs.

16-bit and float images are contrast-stretched between low and high percentiles, so that a
detector that uses a few hundred of 65 536 grey levels still gives a visible preview.
"""

from __future__ import annotations

import io

import numpy as np
from PIL import Image

# Percentiles of the stretch: clip the darkest and brightest 0.5 % (common practice, no source).
LOW_PERCENTILE = 0.5
HIGH_PERCENTILE = 99.5


def stretch_to_8bit(data: np.ndarray) -> np.ndarray:
    """Map a 2-D array to uint8 between its 0.5th and 99.5th percentiles."""
    finite = np.isfinite(data)
    values = data if finite.all() else data[finite]
    if values.size == 0:
        return np.zeros(data.shape, dtype=np.uint8)
    low, high = np.percentile(values, [LOW_PERCENTILE, HIGH_PERCENTILE])
    if high <= low:
        high = low + 1.0
    if values is not data:
        data = np.where(finite, data, low)
    scaled = (data - low) * (255.0 / (high - low))
    return np.clip(scaled, 0, 255).astype(np.uint8)


def _block_mean(data: np.ndarray, factor: int) -> np.ndarray:
    """Average factor × factor blocks: a cheap, alias-free shrink before the final resize."""
    if factor <= 1:
        return data.astype(np.float64, copy=False)
    h, w = (data.shape[0] // factor) * factor, (data.shape[1] // factor) * factor
    blocks = data[:h, :w].reshape(h // factor, factor, w // factor, factor)
    return blocks.mean(axis=(1, 3), dtype=np.float64)


def make_thumbnail(data: np.ndarray, *, max_side: int = 512) -> bytes:
    """A PNG (bytes) of the image, at most `max_side` pixels on its longer side."""
    if data.ndim != 2 or data.size == 0:
        raise ValueError("a thumbnail needs a non-empty 2-D image")
    factor = max(1, max(data.shape) // max_side)
    small = _block_mean(data, factor) if min(data.shape) >= factor else data.astype(np.float64)
    image = Image.fromarray(stretch_to_8bit(small), mode="L")
    image.thumbnail((max_side, max_side), Image.Resampling.LANCZOS)
    buffer = io.BytesIO()
    image.save(buffer, format="PNG")
    return buffer.getvalue()

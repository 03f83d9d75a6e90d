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
    finite = data[np.isfinite(data)]
    if finite.size == 0:
        return np.zeros(data.shape, dtype=np.uint8)
    low, high = np.percentile(finite, [LOW_PERCENTILE, HIGH_PERCENTILE])
    if high <= low:
        high = low + 1.0
    scaled = (np.nan_to_num(data, nan=low) - low) * (255.0 / (high - low))
    return np.clip(scaled, 0, 255).astype(np.uint8)


def make_thumbnail(data: np.ndarray, *, max_side: int = 512) -> bytes:
    """A PNG (bytes) of the image, at most `max_side` pixels on its longer side."""
    if data.ndim != 2 or data.size == 0:
        raise ValueError("a thumbnail needs a non-empty 2-D image")
    image = Image.fromarray(stretch_to_8bit(data.astype(np.float64, copy=False)), mode="L")
    image.thumbnail((max_side, max_side), Image.Resampling.LANCZOS)
    buffer = io.BytesIO()
    image.save(buffer, format="PNG", optimize=True)
    return buffer.getvalue()

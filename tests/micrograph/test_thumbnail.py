"""Thumbnails: size, contrast stretch of 16-bit data, and odd inputs."""

from __future__ import annotations

import io

import numpy as np
import pytest
from PIL import Image

from facility.micrograph.thumbnail import make_thumbnail, stretch_to_8bit


def _open(png: bytes) -> np.ndarray:
    image = Image.open(io.BytesIO(png))
    assert image.format == "PNG"
    return np.asarray(image)


def test_longer_side_is_at_most_512():
    thumb = _open(make_thumbnail(np.random.default_rng(1).random((1536, 2048))))
    assert max(thumb.shape) <= 512 and thumb.shape[1] >= 500
    # Aspect ratio kept: 2048 / 1536 = 4 / 3.
    assert thumb.shape[1] / thumb.shape[0] == pytest.approx(4 / 3, rel=0.02)


def test_dim_16_bit_data_is_stretched_to_the_full_range():
    # A detector that uses grey levels 1000–1400 of 65 535 still gives a visible preview.
    data = np.linspace(1000, 1400, 256 * 256).reshape(256, 256).astype(np.uint16)
    out = stretch_to_8bit(data.astype(float))
    # np.percentile is the reference: 0.5th percentile maps to 0, 99.5th to 255.
    assert out.min() == 0 and out.max() == 255


def test_constant_and_nan_images_do_not_crash():
    assert stretch_to_8bit(np.full((8, 8), 7.0)).max() == 0
    data = np.ones((16, 16))
    data[0, 0] = np.nan
    assert _open(make_thumbnail(data)).shape == (16, 16)


def test_refuses_non_2d():
    with pytest.raises(ValueError, match="2-D"):
        make_thumbnail(np.zeros((2, 2, 3)))

"""Test images written as real files: TIFF with tifffile, PNG/JPEG with Pillow."""

from __future__ import annotations

import io

import numpy as np
import tifffile
from django.core.files.uploadedfile import SimpleUploadedFile
from PIL import Image

from facility.micrograph.synth import make_micrograph
from facility.micrograph.synth.charging import ChargingSpec


def tiff_bytes(
    image: np.ndarray, description: str | None = None, compression: str | None = None
) -> bytes:
    buffer = io.BytesIO()
    tifffile.imwrite(buffer, image, description=description, compression=compression)
    return buffer.getvalue()


def png_bytes(image: np.ndarray) -> bytes:
    buffer = io.BytesIO()
    Image.fromarray(image).save(buffer, format="PNG")
    return buffer.getvalue()


def clean(seed: int = 1, sigma: float = 1.5, bit_depth: int = 16, shape=(384, 384)) -> np.ndarray:
    return make_micrograph(
        seed=seed, shape=shape, scene="particles", sigma_px=sigma, dose=400, bit_depth=bit_depth
    ).image


def charged(seed: int = 2, shape=(384, 384)) -> np.ndarray:
    spec = ChargingSpec(kinds=("clipped", "line_jumps", "streaks", "tails"), strength=0.9)
    return make_micrograph(
        seed=seed,
        shape=shape,
        scene="particles",
        sigma_px=1.5,
        dose=400,
        bit_depth=16,
        charging=spec,
    ).image


def blurred(seed: int = 3, shape=(384, 384)) -> np.ndarray:
    return make_micrograph(
        seed=seed, shape=shape, scene="particles", sigma_px=6.0, dose=400, bit_depth=16
    ).image


def upload(data: bytes, name: str = "image.tif") -> SimpleUploadedFile:
    return SimpleUploadedFile(name, data, content_type="application/octet-stream")

"""Read micrograph files (TIFF, PNG, JPEG) into a 2-D float array with their raw metadata.

The file type is decided by its magic bytes, never by its name. ``probe`` reads only the header
(for upload budgets); ``read_image`` decodes the first page after checking the declared size
against a pixel budget, so a file that claims a huge size is refused before anything is allocated.
Every failure surfaces as :class:`ImageReadError` with a message a person can act on.
"""

from __future__ import annotations

import io
import logging
import os
import struct
import warnings
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field, replace
from enum import Enum
from typing import IO, Any, BinaryIO

import numpy as np
import tifffile
from PIL import Image, UnidentifiedImageError

__all__ = [
    "DEFAULT_MAX_PIXELS",
    "LUMA_WEIGHTS",
    "ImageHeader",
    "ImageReadError",
    "LoadedImage",
    "probe",
    "read_image",
]

# Ceiling used when the caller gives no budget: 2**28 px (a 16k × 16k montage) is already 2 GiB as
# float64, which is the most a worker should ever be asked to hold for one image.
DEFAULT_MAX_PIXELS = 2**28

# ITU-R BT.601 luma weights (the same ones Pillow uses for RGB → "L"); chosen over BT.709 because
# detector images saved as RGB are grey copies, for which any weights summing to 1 agree, and 601
# keeps our result identical to what image viewers show for genuinely coloured files.
LUMA_WEIGHTS = (0.299, 0.587, 0.114)

# Tag arrays longer than this (strip offsets of huge files, colour maps) are summarised, not copied.
_MAX_TAG_ITEMS = 256
_MAX_TEXT_CHARS = 1_000_000

_TIFF_MAGICS = (b"II*\x00", b"MM\x00*", b"II+\x00", b"MM\x00+")
_PNG_MAGIC = b"\x89PNG\r\n\x1a\n"
_JPEG_MAGIC = b"\xff\xd8\xff"

Source = str | os.PathLike[str] | BinaryIO


class ImageReadError(ValueError):
    """The file is not an image we can read, or it is damaged, or it exceeds the pixel budget."""


@dataclass(frozen=True)
class ImageHeader:
    """What the header declares, obtained without decoding any pixel data."""

    format: str  # "tiff" | "png" | "jpeg"
    width: int
    height: int
    samples: int
    pages: int
    bit_depth: int
    dtype: str
    bigtiff: bool = False

    @property
    def pixels(self) -> int:
        return self.width * self.height


@dataclass
class LoadedImage:
    """First page as 2-D float64 (RGB → luminance with :data:`LUMA_WEIGHTS`), plus raw metadata."""

    data: np.ndarray
    header: ImageHeader
    tags: dict[str, object] = field(default_factory=dict)
    texts: list[str] = field(default_factory=list)


# --------------------------------------------------------------------------- opening sources


@contextmanager
def _open(source: Source) -> Iterator[IO[bytes]]:
    """Yield a seekable binary handle positioned at the start of the image."""
    if isinstance(source, str | os.PathLike):
        try:
            fh = open(source, "rb")  # noqa: SIM115 - closed in the finally below
        except OSError as exc:
            raise ImageReadError(f"cannot open file: {exc.strerror or exc}") from exc
        try:
            yield fh
        finally:
            fh.close()
        return
    handle: Any = source
    if not hasattr(handle, "read"):
        raise ImageReadError(f"not a path or binary file object: {type(source).__name__}")
    seekable = getattr(handle, "seekable", lambda: False)()
    if not seekable:
        # TIFF needs random access; a stream (e.g. an upload chunk iterator) is buffered once.
        yield io.BytesIO(handle.read())
        return
    start = handle.tell()
    try:
        # Readers below see offset 0 as the image start, so wrap a handle that starts mid-stream.
        yield handle if start == 0 else io.BytesIO(handle.read())
    finally:
        handle.seek(start)


def file_type(head: bytes) -> str | None:
    """ "tiff", "png" or "jpeg" from a file's first 8 bytes (its magic number); None otherwise."""
    if head[:4] in _TIFF_MAGICS:
        return "tiff"
    if head[:8] == _PNG_MAGIC:
        return "png"
    if head[:3] == _JPEG_MAGIC:
        return "jpeg"
    return None


def _sniff(fh: IO[bytes]) -> str:
    head = fh.read(8)
    fh.seek(0)
    if not head:
        raise ImageReadError("file is empty")
    kind = file_type(head)
    if kind is None:
        raise ImageReadError("unknown file type: not TIFF, PNG or JPEG (checked the first bytes)")
    return kind


def _file_size(fh: IO[bytes]) -> int:
    pos = fh.tell()
    fh.seek(0, os.SEEK_END)
    size = fh.tell()
    fh.seek(pos)
    return size


@contextmanager
def _quiet_tifffile() -> Iterator[None]:
    """tifffile logs damaged tags and carries on; we report damage by raising instead."""
    logger = logging.getLogger("tifffile")
    previous = logger.level
    logger.setLevel(logging.CRITICAL)
    try:
        yield
    finally:
        logger.setLevel(previous)


# --------------------------------------------------------------------------- TIFF


def _tiff_header(tif: tifffile.TiffFile) -> ImageHeader:
    pages = len(tif.pages)
    if pages == 0:
        raise ImageReadError("TIFF has no readable image page (damaged or truncated header)")
    page = tif.pages.first
    width, height = int(page.imagewidth), int(page.imagelength)
    if width <= 0 or height <= 0:
        raise ImageReadError(f"TIFF declares an empty image ({width} × {height})")
    dtype = page.dtype
    return ImageHeader(
        format="tiff",
        width=width,
        height=height,
        samples=int(page.samplesperpixel),
        pages=pages,
        bit_depth=int(page.bitspersample),
        dtype=str(dtype) if dtype is not None else "unknown",
        bigtiff=bool(tif.is_bigtiff),
    )


def _check_tiff_extent(page: tifffile.TiffPage, size: int) -> None:
    """Refuse a page whose strips or tiles lie past the end of the file (a truncated file)."""
    offsets = page.dataoffsets
    counts = page.databytecounts
    if not offsets or not counts:
        raise ImageReadError("TIFF page has no image data (missing strip or tile offsets)")
    end = max(int(o) + int(c) for o, c in zip(offsets, counts, strict=False))
    if end > size:
        raise ImageReadError(
            f"file is truncated: image data runs to byte {end} but the file has {size} bytes"
        )


def _tiff_pixels(page: tifffile.TiffPage) -> np.ndarray:
    arr = page.asarray()
    axes = page.axes
    if "S" in axes and axes.index("S") != len(axes) - 1:
        arr = np.moveaxis(arr, axes.index("S"), -1)  # planar-separate storage
    # Volumetric (SGI depth) pages: keep the first plane, like the first page of a stack.
    while arr.ndim > (3 if "S" in axes else 2):
        arr = arr[0]
    photometric = page.photometric
    if photometric == tifffile.PHOTOMETRIC.PALETTE and page.colormap is not None:
        arr = np.moveaxis(np.asarray(page.colormap)[:, arr], 0, -1)
    elif photometric == tifffile.PHOTOMETRIC.MINISWHITE and arr.dtype.kind in "ub":
        arr = np.iinfo(arr.dtype).max - arr if arr.dtype.kind == "u" else ~arr
    return arr


def _read_tiff(fh: IO[bytes], max_pixels: int | None, decode: bool) -> LoadedImage:
    size = _file_size(fh)
    with _quiet_tifffile(), tifffile.TiffFile(fh) as tif:
        header = _tiff_header(tif)
        if not decode:
            return LoadedImage(np.empty((0, 0)), header)
        _check_budget(header, max_pixels)
        page = tif.pages.first
        _check_tiff_extent(page, size)
        tags, texts = _tiff_tags(page)
        pixels = _tiff_pixels(page)
    return LoadedImage(_to_gray(pixels), header, tags, texts)


def _tiff_tags(page: tifffile.TiffPage) -> tuple[dict[str, object], list[str]]:
    tags: dict[str, object] = {}
    texts: list[str] = []
    for tag in page.tags:
        name = tag.name or str(tag.code)
        key, n = name, 1
        while key in tags:  # tifffile may write a second ImageDescription; keep both
            n += 1
            key = f"{name}#{n}"
        try:
            value = tag.value
        except Exception:  # a tag whose value cannot be decoded is kept as a marker, not fatal
            tags[key] = "<unreadable>"
            continue
        tags[key] = _jsonable(value)
        if tag.dtype == 2 and isinstance(value, str | bytes):
            text = _text(value)
            if text.strip():
                texts.append(text)
    # ImageDescription first: it is where key/value blocks and OME-XML normally live.
    texts.sort(key=lambda t: 0 if tags.get("ImageDescription") == t else 1)
    return tags, texts


# --------------------------------------------------------------------------- PNG / JPEG


def _png_ihdr(fh: IO[bytes]) -> tuple[int, int, int, int]:
    """Width, height, bit depth, colour type from IHDR (PNG, ISO/IEC 15948 §11.2.2)."""
    data = fh.read(33)
    fh.seek(0)
    if len(data) < 33 or data[12:16] != b"IHDR":
        raise ImageReadError("PNG is truncated or its IHDR header chunk is missing")
    width, height, depth, colour = struct.unpack(">IIBB", data[16:26])
    if colour not in (0, 2, 3, 4, 6) or depth not in (1, 2, 4, 8, 16):
        raise ImageReadError(f"PNG header is invalid (bit depth {depth}, colour type {colour})")
    return width, height, depth, colour


def _pillow_header(fh: IO[bytes], fmt: str) -> tuple[ImageHeader, Image.Image]:
    png = _png_ihdr(fh) if fmt == "png" else None
    try:
        # Pillow's decompression-bomb guard stays on: it raises for more than 2 × MAX_IMAGE_PIXELS.
        img = Image.open(fh, formats=["PNG"] if fmt == "png" else ["JPEG"])
    except Image.DecompressionBombError as exc:
        raise ImageReadError(f"image is too large to read safely: {exc}") from exc
    except UnidentifiedImageError as exc:  # its message carries a stream repr, useless to a person
        raise ImageReadError(f"damaged {fmt.upper()} header: not decodable") from exc
    except (OSError, SyntaxError, ValueError, struct.error) as exc:
        raise ImageReadError(f"damaged {fmt.upper()} header: {exc}") from exc
    width, height = img.size
    samples = len(img.getbands())
    if png is not None:
        width, height, depth, colour = png
        samples = {0: 1, 2: 3, 3: 3, 4: 2, 6: 4}[colour]
        bit_depth = 8 if colour == 3 else depth  # palette entries are 8-bit RGB
    else:
        bit_depth = int(getattr(img, "bits", 8))
    dtype = "uint16" if bit_depth > 8 else "uint8"
    if width <= 0 or height <= 0:
        raise ImageReadError(f"{fmt.upper()} declares an empty image ({width} × {height})")
    header = ImageHeader(fmt, width, height, samples, getattr(img, "n_frames", 1), bit_depth, dtype)
    return header, img


def _read_pillow(fh: IO[bytes], fmt: str, max_pixels: int | None, decode: bool) -> LoadedImage:
    header, img = _pillow_header(fh, fmt)
    with img:
        if not decode:
            return LoadedImage(np.empty((0, 0)), header)
        _check_budget(header, max_pixels)
        try:
            img.load()
        except Image.DecompressionBombError as exc:
            raise ImageReadError(f"image is too large to read safely: {exc}") from exc
        except (OSError, SyntaxError, ValueError, struct.error, EOFError) as exc:
            raise ImageReadError(f"damaged or truncated {fmt.upper()} data: {exc}") from exc
        info = {k: v for k, v in img.info.items() if k not in ("icc_profile", "exif")}
        tags = {str(k): _jsonable(v) for k, v in info.items()}
        texts = [_text(v) for v in info.values() if isinstance(v, str | bytes)]
        texts = [t for t in texts if t.strip() and _looks_like_text(t)]
        exif = img.getexif()
        description = exif.get(270)  # EXIF/TIFF ImageDescription, where cameras put free text
        if isinstance(description, str | bytes) and _text(description).strip():
            texts.insert(0, _text(description))
            tags.setdefault("ImageDescription", _text(description))
        arr = _pillow_pixels(img)
    if header.bit_depth > 8 and arr.dtype == np.uint8:
        # Pillow decodes 16-bit colour PNGs to 8 bits per channel; describe the data we hold.
        tags["declared_bit_depth"] = header.bit_depth
        header = replace(header, bit_depth=8, dtype="uint8")
    return LoadedImage(_to_gray(arr), header, tags, texts)


def _looks_like_text(text: str) -> bool:
    """True for human-readable text (PNG text chunks), false for binary blobs Pillow exposes."""
    printable = sum(ch.isprintable() or ch in "\r\n\t" for ch in text[:4096])
    return printable >= 0.95 * min(len(text), 4096)


def _pillow_pixels(img: Image.Image) -> np.ndarray:
    mode = img.mode
    if mode == "P" or mode == "PA":
        img = img.convert("RGBA" if "transparency" in img.info or mode == "PA" else "RGB")
    elif mode in ("CMYK", "YCbCr", "LAB", "HSV"):
        img = img.convert("RGB")
    elif mode == "1":
        img = img.convert("L")
    return np.asarray(img)


# --------------------------------------------------------------------------- shared helpers


def _check_budget(header: ImageHeader, max_pixels: int | None) -> None:
    limit = DEFAULT_MAX_PIXELS if max_pixels is None else max_pixels
    if header.pixels > limit:
        raise ImageReadError(
            f"image declares {header.width} × {header.height} = {header.pixels} pixels, "
            f"more than the limit of {limit}"
        )


def _to_gray(arr: np.ndarray) -> np.ndarray:
    """Collapse samples to one plane: grey(+alpha) keeps the grey, RGB(A) takes BT.601 luma."""
    if arr.dtype == np.bool_:
        arr = arr.astype(np.uint8)
    if arr.ndim == 3:
        if arr.shape[-1] >= 3:
            rgb = arr[..., :3].astype(np.float64)
            arr = rgb @ np.asarray(LUMA_WEIGHTS)
        else:
            arr = arr[..., 0]
    if arr.ndim != 2:
        raise ImageReadError(f"unexpected pixel layout with shape {arr.shape}")
    if arr.dtype.kind == "c":
        arr = np.abs(arr)  # complex (FFT) pages: magnitude is the only sensible grey value
    return np.ascontiguousarray(arr, dtype=np.float64)


def _text(value: str | bytes) -> str:
    if isinstance(value, bytes):
        value = value.decode("utf-8", errors="replace")
    return value.replace("\x00", "")[:_MAX_TEXT_CHARS]


def _jsonable(value: object) -> object:
    """Tag value as plain JSON types: enums by name, bytes as text, arrays as short lists."""
    if isinstance(value, Enum):
        return value.name
    if isinstance(value, bool | int | float | str) or value is None:
        if isinstance(value, float) and not np.isfinite(value):
            return str(value)
        return _text(value) if isinstance(value, str) else value
    if isinstance(value, bytes):
        text = _text(value)
        return text if _looks_like_text(text) else f"<{len(value)} bytes>"
    if isinstance(value, np.generic):
        return _jsonable(value.item())
    if isinstance(value, np.ndarray):
        if value.size > _MAX_TAG_ITEMS:
            return f"<array {value.dtype} {list(value.shape)}>"
        return [_jsonable(v) for v in value.ravel().tolist()]
    if isinstance(value, dict):
        return {str(k): _jsonable(v) for k, v in list(value.items())[:_MAX_TAG_ITEMS]}
    if isinstance(value, list | tuple):
        if len(value) > _MAX_TAG_ITEMS:
            return f"<{len(value)} values>"
        return [_jsonable(v) for v in value]
    return str(value)


def _dispatch(source: Source, max_pixels: int | None, decode: bool) -> LoadedImage:
    with _open(source) as fh:
        fmt = _sniff(fh)
        try:
            with warnings.catch_warnings():
                # Pillow's DecompressionBombWarning (between 1× and 2× its limit) is left to our own
                # pixel budget; other warnings from decoders are noise for the caller.
                warnings.simplefilter("ignore")
                if fmt == "tiff":
                    return _read_tiff(fh, max_pixels, decode)
                return _read_pillow(fh, fmt, max_pixels, decode)
        except ImageReadError:
            raise
        except MemoryError as exc:
            raise ImageReadError("image is too large to decode in the available memory") from exc
        except Exception as exc:  # any decoder failure on hostile input is a read error
            detail = str(exc).strip() or type(exc).__name__
            raise ImageReadError(f"cannot read {fmt.upper()}: {detail}") from exc


def probe(source: Source) -> ImageHeader:
    """Header of an image file or binary stream, by magic bytes, without decoding pixels."""
    return _dispatch(source, None, decode=False).header


def read_image(source: Source, *, max_pixels: int | None = None) -> LoadedImage:
    """Decode the first page of a TIFF/PNG/JPEG into a 2-D float64 array with its tags and texts.

    ``max_pixels`` is the budget on width × height checked before decoding (default
    :data:`DEFAULT_MAX_PIXELS`). Raises :class:`ImageReadError` for anything unreadable.
    """
    return _dispatch(source, max_pixels, decode=True)

"""Reading TIFF/PNG/JPEG: formats written by tifffile and Pillow as the reference writers.

Every expected array is the one the reference library itself wrote (or, for lossy JPEG, read back),
so these tests compare our reader with tifffile/Pillow, not with itself.
"""

from __future__ import annotations

import io
import struct
import time
import zlib
from pathlib import Path

import numpy as np
import pytest
import tifffile
from PIL import Image, ImageFile

from facility.micrograph.read import (
    LUMA_WEIGHTS,
    ImageHeader,
    ImageReadError,
    LoadedImage,
    probe,
    read_image,
)

RNG = np.random.default_rng(20240501)
GRAY8 = RNG.integers(0, 256, (48, 64), dtype=np.uint8)
GRAY16 = RNG.integers(0, 65536, (48, 64), dtype=np.uint16)
FLOAT32 = RNG.normal(0.0, 1.0, (48, 64)).astype(np.float32)
RGB8 = RNG.integers(0, 256, (48, 64, 3), dtype=np.uint8)


def tiff_bytes(data: np.ndarray, **kwargs: object) -> bytes:
    buffer = io.BytesIO()
    tifffile.imwrite(buffer, data, **kwargs)
    return buffer.getvalue()


def pillow_bytes(image: Image.Image, fmt: str, **kwargs: object) -> bytes:
    buffer = io.BytesIO()
    image.save(buffer, format=fmt, **kwargs)
    return buffer.getvalue()


def bt601(rgb: np.ndarray) -> np.ndarray:
    # ITU-R BT.601 luma: Y = 0.299 R + 0.587 G + 0.114 B (Rec. 601, §2.5.1).
    r, g, b = (rgb[..., i].astype(np.float64) for i in range(3))
    return 0.299 * r + 0.587 * g + 0.114 * b


@pytest.mark.parametrize(
    ("data", "kwargs", "bit_depth", "dtype"),
    [
        (GRAY8, {}, 8, "uint8"),
        (GRAY16, {}, 16, "uint16"),
        (FLOAT32, {}, 32, "float32"),
        (GRAY16, {"compression": "zlib"}, 16, "uint16"),
        (GRAY16, {"compression": "lzw"}, 16, "uint16"),
        (GRAY16, {"compression": "lzw", "predictor": True}, 16, "uint16"),
        (GRAY8, {"tile": (16, 16)}, 8, "uint8"),
        (GRAY16, {"tile": (32, 32), "compression": "zlib"}, 16, "uint16"),
        (GRAY8, {"bigtiff": True}, 8, "uint8"),
        (GRAY8, {"byteorder": ">"}, 8, "uint8"),
        (GRAY16, {"byteorder": ">"}, 16, "uint16"),
    ],
    ids=[
        "u8",
        "u16",
        "f32",
        "deflate",
        "lzw",
        "lzw-predictor",
        "tiled",
        "tiled-deflate",
        "bigtiff",
        "big-endian-u8",
        "big-endian-u16",
    ],
)
def test_tiff_variants_read_exactly(
    data: np.ndarray, kwargs: dict, bit_depth: int, dtype: str
) -> None:
    # Reference: tifffile wrote `data`; the reader must return the same numbers as float64.
    raw = tiff_bytes(data, **kwargs)
    loaded = read_image(io.BytesIO(raw))
    assert loaded.data.dtype == np.float64
    assert loaded.data.shape == data.shape
    np.testing.assert_array_equal(loaded.data, data.astype(np.float64))
    header = loaded.header
    assert (header.format, header.width, header.height) == ("tiff", 64, 48)
    assert (header.bit_depth, header.dtype, header.samples, header.pages) == (
        bit_depth,
        dtype,
        1,
        1,
    )
    assert header.bigtiff == bool(kwargs.get("bigtiff"))
    assert probe(io.BytesIO(raw)) == header


def test_multipage_tiff_gives_first_page_and_counts_pages(tmp_path: Path) -> None:
    path = tmp_path / "stack.tif"
    for i in range(3):
        tifffile.imwrite(path, GRAY8 + np.uint8(i), append=True, photometric="minisblack")
    loaded = read_image(path)
    np.testing.assert_array_equal(loaded.data, GRAY8.astype(float))
    assert loaded.header.pages == 3
    assert probe(path).pages == 3


@pytest.mark.parametrize("planar", ["contig", "separate"])
def test_rgb_tiff_becomes_bt601_luminance(planar: str) -> None:
    data = RGB8 if planar == "contig" else np.moveaxis(RGB8, -1, 0)
    raw = tiff_bytes(data, photometric="rgb", planarconfig=planar)
    loaded = read_image(io.BytesIO(raw))
    assert loaded.header.samples == 3
    np.testing.assert_allclose(loaded.data, bt601(RGB8), rtol=1e-12)


def test_luma_weights_are_bt601_and_agree_with_pillow() -> None:
    # ITU-R BT.601 weights; Pillow's RGB -> "L" uses the same ones (Pillow docs, Image.convert),
    # rounding to integers, so the two agree within one grey level.
    assert pytest.approx((0.299, 0.587, 0.114)) == LUMA_WEIGHTS
    raw = pillow_bytes(Image.fromarray(RGB8), "PNG")
    ours = read_image(io.BytesIO(raw)).data
    pillow_l = np.asarray(Image.open(io.BytesIO(raw)).convert("L"), dtype=float)
    assert np.max(np.abs(ours - pillow_l)) <= 1.0


def test_miniswhite_tiff_is_inverted_to_bright_signal() -> None:
    # TIFF 6.0 PhotometricInterpretation 0 (WhiteIsZero): 0 means white.
    raw = tiff_bytes(GRAY8, photometric="miniswhite")
    np.testing.assert_array_equal(read_image(io.BytesIO(raw)).data, 255.0 - GRAY8)


def test_palette_tiff_is_mapped_through_its_colour_map() -> None:
    indices = (GRAY8 % 4).astype(np.uint8)
    cmap = np.zeros((3, 256), np.uint16)
    cmap[:, 1] = 65535  # index 1 is white, everything else black
    raw = tiff_bytes(indices, photometric="palette", colormap=cmap)
    expected = np.where(indices == 1, 65535.0 * sum(LUMA_WEIGHTS), 0.0)
    np.testing.assert_allclose(read_image(io.BytesIO(raw)).data, expected, rtol=1e-12)


def test_tiff_tags_are_kept_json_friendly_and_texts_collected() -> None:
    raw = tiff_bytes(
        GRAY8,
        description="HV = 5 kV",
        software="beamledger-test",
        resolution=(1e6, 1e6),
        resolutionunit="CENTIMETER",
    )
    loaded = read_image(io.BytesIO(raw))
    assert loaded.tags["ImageWidth"] == 64
    assert loaded.tags["ResolutionUnit"] == "CENTIMETER"
    assert loaded.tags["XResolution"] == [1000000, 1]
    assert loaded.tags["Compression"] == "NONE"
    assert loaded.texts[0] == "HV = 5 kV"  # ImageDescription first
    assert "beamledger-test" in loaded.texts
    import json

    json.dumps(loaded.tags)  # must not raise


def test_png_8_and_16_bit_and_text_chunks() -> None:
    from PIL import PngImagePlugin

    info = PngImagePlugin.PngInfo()
    info.add_text("Comment", "WD = 4 mm")
    raw8 = pillow_bytes(Image.fromarray(GRAY8), "PNG", pnginfo=info)
    loaded = read_image(io.BytesIO(raw8))
    np.testing.assert_array_equal(loaded.data, GRAY8.astype(float))
    assert loaded.header == ImageHeader("png", 64, 48, 1, 1, 8, "uint8", False)
    assert "WD = 4 mm" in loaded.texts

    raw16 = pillow_bytes(Image.fromarray(GRAY16), "PNG")
    loaded16 = read_image(io.BytesIO(raw16))
    np.testing.assert_array_equal(loaded16.data, GRAY16.astype(float))
    assert (loaded16.header.bit_depth, loaded16.header.dtype) == (16, "uint16")


def test_png_rgb_and_palette() -> None:
    raw = pillow_bytes(Image.fromarray(RGB8), "PNG")
    loaded = read_image(io.BytesIO(raw))
    assert loaded.header.samples == 3
    np.testing.assert_allclose(loaded.data, bt601(RGB8), rtol=1e-12)
    palette_image = Image.fromarray(RGB8).quantize(8)
    raw_p = pillow_bytes(palette_image, "PNG")
    expected = bt601(np.asarray(palette_image.convert("RGB")))
    np.testing.assert_allclose(read_image(io.BytesIO(raw_p)).data, expected, rtol=1e-12)


def test_16_bit_colour_png_reports_the_depth_actually_decoded() -> None:
    # Built by hand per the PNG spec (ISO/IEC 15948): colour type 2, 16 bits per channel.
    rgb16 = (RGB8.astype(">u2") * 257)[:4, :5]
    rows = b"".join(b"\x00" + row.tobytes() for row in rgb16)

    def chunk(kind: bytes, data: bytes) -> bytes:
        return (
            struct.pack(">I", len(data)) + kind + data + struct.pack(">I", zlib.crc32(kind + data))
        )

    png = b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", struct.pack(">IIBBBBB", 5, 4, 16, 2, 0, 0, 0))
    png += chunk(b"IDAT", zlib.compress(rows)) + chunk(b"IEND", b"")
    assert probe(io.BytesIO(png)).bit_depth == 16  # what the header declares
    loaded = read_image(io.BytesIO(png))
    # Pillow keeps the high byte of each channel, which for v·257 is v itself.
    assert (loaded.header.bit_depth, loaded.tags["declared_bit_depth"]) == (8, 16)
    np.testing.assert_allclose(loaded.data, bt601(RGB8[:4, :5]), rtol=1e-12)


def test_jpeg_matches_pillow_decode_and_keeps_comment() -> None:
    raw = pillow_bytes(Image.fromarray(GRAY8), "JPEG", quality=90, comment=b"Mag = 5000 x")
    loaded = read_image(io.BytesIO(raw))
    reference = np.asarray(Image.open(io.BytesIO(raw)), dtype=float)  # Pillow as reference decoder
    np.testing.assert_array_equal(loaded.data, reference)
    assert loaded.header == ImageHeader("jpeg", 64, 48, 1, 1, 8, "uint8", False)
    assert "Mag = 5000 x" in loaded.texts


def test_type_is_decided_by_magic_bytes_not_name(tmp_path: Path) -> None:
    misnamed = tmp_path / "really_a_png.tif"
    misnamed.write_bytes(pillow_bytes(Image.fromarray(GRAY8), "PNG"))
    assert probe(misnamed).format == "png"
    text = tmp_path / "notes.tif"
    text.write_text("HV = 5 kV\n")
    with pytest.raises(ImageReadError, match="unknown file type"):
        probe(text)


def test_probe_does_not_decode_pixels(monkeypatch: pytest.MonkeyPatch) -> None:
    raw = tiff_bytes(GRAY16, compression="zlib")
    png = pillow_bytes(Image.fromarray(GRAY8), "PNG")
    jpeg = pillow_bytes(Image.fromarray(GRAY8), "JPEG")

    def forbidden(*args: object, **kwargs: object) -> None:
        raise AssertionError("probe decoded pixel data")

    monkeypatch.setattr(tifffile.TiffPage, "asarray", forbidden)
    monkeypatch.setattr(ImageFile.ImageFile, "load", forbidden)
    assert probe(io.BytesIO(raw)).width == 64
    assert probe(io.BytesIO(png)).height == 48
    assert probe(io.BytesIO(jpeg)).height == 48
    with pytest.raises(ImageReadError, match="decoded pixel data"):  # the trap is armed
        read_image(io.BytesIO(png))


def test_stream_position_is_restored_and_offset_streams_work() -> None:
    raw = tiff_bytes(GRAY8)
    stream = io.BytesIO(b"junk" + raw)
    stream.seek(4)
    assert read_image(stream).data.shape == (48, 64)
    assert stream.tell() == 4


# ----------------------------------------------------------------------------- malformed input


def _patch_tiff_size(raw: bytes, width: int, height: int) -> bytes:
    with tifffile.TiffFile(io.BytesIO(raw)) as tif:
        tags = tif.pages.first.tags
        offsets = tags["ImageWidth"].valueoffset, tags["ImageLength"].valueoffset
        fmt = "<I" if tags["ImageWidth"].dtype == 4 else "<H"
    patched = bytearray(raw)
    struct.pack_into(fmt, patched, offsets[0], width)
    struct.pack_into(fmt, patched, offsets[1], height)
    return bytes(patched)


def _png_with_size(width: int, height: int) -> bytes:
    # PNG spec (ISO/IEC 15948): IHDR = width, height, depth, colour, compression, filter, interlace
    # followed by a CRC-32 of type + data, so the chunk is valid and only the size is hostile.
    ihdr = struct.pack(">IIBBBBB", width, height, 8, 0, 0, 0, 0)
    chunk = struct.pack(">I", 13) + b"IHDR" + ihdr + struct.pack(">I", zlib.crc32(b"IHDR" + ihdr))
    idat = zlib.compress(b"\x00" * 16)
    idat_chunk = struct.pack(">I", len(idat)) + b"IDAT" + idat
    idat_chunk += struct.pack(">I", zlib.crc32(b"IDAT" + idat))
    iend = struct.pack(">I", 0) + b"IEND" + struct.pack(">I", zlib.crc32(b"IEND"))
    return b"\x89PNG\r\n\x1a\n" + chunk + idat_chunk + iend


MALFORMED = {
    "empty": b"",
    "text": b"HV = 5 kV\nWD = 4 mm\n",
    "tiff magic only": b"II*\x00",
    "tiff header, IFD past end": b"II*\x00" + struct.pack("<I", 10_000),
    "tiff truncated in IFD": tiff_bytes(GRAY8)[:20],
    "tiff truncated in data": tiff_bytes(GRAY8)[:1500],
    "deflate truncated": tiff_bytes(GRAY16, compression="zlib")[:-300],
    "tiff garbage IFD": b"II*\x00\x08\x00\x00\x00"
    + bytes(RNG.integers(0, 256, 600, dtype=np.uint8)),
    "tiff huge declared size": _patch_tiff_size(tiff_bytes(GRAY8), 100_000, 100_000),
    "png truncated": pillow_bytes(Image.fromarray(GRAY8), "PNG")[:200],
    "png header only": pillow_bytes(Image.fromarray(GRAY8), "PNG")[:30],
    "png huge declared size": _png_with_size(200_000, 200_000),
    "jpeg truncated": pillow_bytes(Image.fromarray(GRAY8), "JPEG")[:300],
    "jpeg magic only": b"\xff\xd8\xff",
}


@pytest.mark.parametrize("name", sorted(MALFORMED))
def test_malformed_input_gives_read_error_quickly(name: str) -> None:
    started = time.perf_counter()
    with pytest.raises(ImageReadError) as info:
        read_image(io.BytesIO(MALFORMED[name]))
    assert str(info.value)  # a message a person can read
    assert "object at 0x" not in str(info.value)
    assert time.perf_counter() - started < 2.0  # common practice: never hang on bad input


def test_huge_declared_size_is_refused_by_probe_budget_before_allocation() -> None:
    raw = MALFORMED["tiff huge declared size"]
    header = probe(io.BytesIO(raw))  # the header alone is readable ...
    assert header.pixels == 10**10
    with pytest.raises(ImageReadError, match="more than the limit"):
        read_image(io.BytesIO(raw), max_pixels=10**7)  # ... decoding it is refused up front
    with pytest.raises(ImageReadError):  # even with a generous budget the data is missing
        read_image(io.BytesIO(raw), max_pixels=10**11)


def test_max_pixels_budget_applies_to_valid_images() -> None:
    raw = tiff_bytes(GRAY8)
    with pytest.raises(ImageReadError, match="3072 pixels"):
        read_image(io.BytesIO(raw), max_pixels=3000)
    assert read_image(io.BytesIO(raw), max_pixels=3072).data.shape == (48, 64)


def test_pillow_decompression_bomb_guard_is_still_on() -> None:
    # Pillow raises DecompressionBombError above 2 × MAX_IMAGE_PIXELS (Pillow docs, Image.open).
    assert Image.MAX_IMAGE_PIXELS is not None
    with pytest.raises(ImageReadError, match="too large"):
        probe(io.BytesIO(_png_with_size(200_000, 200_000)))


def test_missing_file_is_a_read_error(tmp_path: Path) -> None:
    with pytest.raises(ImageReadError, match="cannot open"):
        read_image(tmp_path / "absent.tif")


def test_randomly_corrupted_files_never_crash() -> None:
    # Mutation fuzzing, seeded: every outcome must be a LoadedImage or an ImageReadError.
    rng = np.random.default_rng(7)
    sources = [
        tiff_bytes(GRAY16, compression="zlib", tile=(32, 32), description="WD = 4 mm"),
        tiff_bytes(GRAY8, compression="lzw"),
        tiff_bytes(GRAY8, bigtiff=True),
        pillow_bytes(Image.fromarray(GRAY8), "PNG"),
        pillow_bytes(Image.fromarray(GRAY8), "JPEG"),
    ]
    outcomes = {"read": 0, "error": 0}
    for source in sources:
        for _ in range(60):
            damaged = bytearray(source)
            for _ in range(int(rng.integers(1, 6))):
                position = int(rng.integers(0, min(len(damaged), 300)))
                damaged[position] = int(rng.integers(0, 256))
            if rng.random() < 0.3:
                damaged = damaged[: int(rng.integers(1, len(damaged)))]
            try:
                result = read_image(io.BytesIO(bytes(damaged)), max_pixels=10**6)
            except ImageReadError:
                outcomes["error"] += 1
            else:
                assert isinstance(result, LoadedImage) and result.data.ndim == 2
                outcomes["read"] += 1
    assert outcomes["error"] > 0 and outcomes["read"] > 0  # both paths really exercised


@pytest.mark.parametrize(
    ("head", "kind"),
    [
        # TIFF 6.0 specification, section 2 (byte order "II"/"MM", then 42); BigTIFF uses 43
        (b"II*\x00\x08\x00\x00\x00", "tiff"),
        (b"MM\x00*\x00\x00\x00\x08", "tiff"),
        (b"II+\x00\x08\x00\x00\x00", "tiff"),
        # PNG specification (ISO/IEC 15948), 5.2: the eight-byte signature
        (b"\x89PNG\r\n\x1a\n", "png"),
        # JPEG (ITU-T T.81) starts with the SOI marker FF D8, then another marker's FF
        (b"\xff\xd8\xff\xe0\x00\x10JF", "jpeg"),
        (b"GIF89a\x01\x00", None),
        (b"%PDF-1.7", None),
        (b"\x89PNG\r\n", None),  # a truncated signature is no PNG
        (b"", None),
    ],
)
def test_file_type_by_magic_number(head: bytes, kind: str | None) -> None:
    from facility.micrograph.read import file_type

    assert file_type(head) == kind

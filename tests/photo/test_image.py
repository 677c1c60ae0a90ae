import hashlib
import io

import numpy as np
import pytest
from PIL import Image, ImageCms
from reference_data import EXIF_ORIENTATION_PIXELS

from harmony.demo.synthetic import encode_jpeg, encode_png, studio_shot
from harmony.errors import ImageError
from harmony.photo.image import (
    MAX_DECLARED_PIXELS,
    MAX_PIXELS,
    decode_image,
    load_image,
    sha256_bytes,
    sha256_file,
)


def _save(img, fmt="PNG", **kw):
    buf = io.BytesIO()
    img.save(buf, fmt, **kw)
    return buf.getvalue()


def test_sha256_fips_example(tmp_path):
    # gold: FIPS 180-2, Appendix B.1 worked example, SHA-256("abc").
    path = tmp_path / "abc.bin"
    path.write_bytes(b"abc")
    expected = "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
    assert sha256_file(path) == expected
    assert sha256_bytes(b"abc") == expected


def test_sha256_missing_file(tmp_path):
    with pytest.raises(ImageError, match=r"nope\.jpg: no such file"):
        sha256_file(tmp_path / "nope.jpg")
    with pytest.raises(ImageError, match=r": is a directory, not an image$"):
        sha256_file(tmp_path)


def test_decode_records_hash_and_size():
    data = encode_png(np.zeros((30, 50, 3), np.uint8))
    img = decode_image(data, name="x.png")
    assert img.sha256 == hashlib.sha256(data).hexdigest()
    assert (img.width, img.height) == (50, 30)
    assert img.opaque is None


@pytest.mark.parametrize("orientation", [1, 2, 3, 6, 8])
def test_exif_orientation(orientation):
    # gold: CIPA DC-008 (Exif 2.32) orientation semantics, see reference_data.
    block = 16
    stored = np.array(EXIF_ORIENTATION_PIXELS["stored"]) * 50
    grey = np.kron(stored, np.ones((block, block))).astype(np.uint8)
    exif = Image.Exif()
    exif[0x0112] = orientation
    data = _save(Image.fromarray(grey, "L"), "JPEG", quality=100, exif=exif.tobytes())
    img = decode_image(data, name="o.jpg", max_side=None)
    expected = np.array(EXIF_ORIENTATION_PIXELS[orientation]) * 50
    centres = img.srgb8[block // 2 :: block, block // 2 :: block, 0].astype(int)
    assert centres.shape == expected.shape
    assert np.abs(centres - expected).max() <= 3
    rotated = orientation in (6, 8)
    assert (img.width, img.height) == ((32, 48) if rotated else (48, 32))


def test_jpeg_draft_mode_decodes_small_with_the_same_colour():
    shot = studio_shot(np.random.default_rng(3), noise=0.0)
    data = encode_jpeg(shot.srgb8)
    small = decode_image(data, max_side=128)
    full = decode_image(data, max_side=None)
    assert max(small.srgb8.shape[:2]) == 128
    assert full.srgb8.shape[:2] == (800, 800)
    # The centre of the body is flat blue: both scales agree within a few levels.
    c_small = small.srgb8[64, 64].astype(int)
    c_full = full.srgb8[400, 400].astype(int)
    assert np.abs(c_small - c_full).max() <= 4


@pytest.mark.parametrize(
    "mode, value, expected",
    [
        ("L", 100, (100, 100, 100)),
        ("I;16", 25700, (100, 100, 100)),  # 16-bit full scale 65535 maps to 255 (25700 / 257 = 100)
        ("RGB", (10, 200, 30), (10, 200, 30)),
        ("CMYK", (0, 255, 255, 0), (255, 0, 0)),  # common practice: naive CMYK, no profile
    ],
)
def test_modes(mode, value, expected):
    img = Image.new(mode, (20, 10), value)
    fmt = "TIFF" if mode == "CMYK" else "PNG"
    out = decode_image(_save(img, fmt), name=f"m.{fmt.lower()}")
    assert out.srgb8.shape == (10, 20, 3)
    assert tuple(out.srgb8[5, 10]) == expected


def test_alpha_and_palette_modes():
    rgba = np.zeros((10, 10, 4), np.uint8)
    rgba[..., 0] = 200
    rgba[2:8, 2:8, 3] = 255
    out = decode_image(encode_png(rgba))
    assert out.opaque is not None and out.opaque.sum() == 36
    la = Image.fromarray(rgba[..., [0, 3]], "LA")
    assert decode_image(_save(la)).opaque.sum() == 36
    p = Image.fromarray(rgba[..., :3]).convert("P")
    p.info["transparency"] = 0
    assert decode_image(_save(p, transparency=0)).opaque is not None


def test_embedded_srgb_profile_keeps_colours():
    icc = ImageCms.ImageCmsProfile(ImageCms.createProfile("sRGB")).tobytes()
    img = Image.new("RGB", (8, 8), (30, 120, 220))
    out = decode_image(_save(img, "PNG", icc_profile=icc))
    assert np.abs(out.srgb8[4, 4].astype(int) - (30, 120, 220)).max() <= 1


def test_bad_icc_profile():
    img = Image.new("RGB", (8, 8), (30, 120, 220))
    with pytest.raises(ImageError, match=r"bad\.png: embedded ICC profile"):
        decode_image(_save(img, "PNG", icc_profile=b"not a profile at all" * 10), name="bad.png")


def test_missing_directory_not_image_truncated(tmp_path):
    with pytest.raises(ImageError, match=r"gone\.jpg: no such file"):
        load_image(tmp_path / "gone.jpg")
    with pytest.raises(ImageError, match=r": is a directory"):
        load_image(tmp_path)
    text = tmp_path / "notes.jpg"
    text.write_text("hello")
    with pytest.raises(ImageError, match=r"notes\.jpg: not an image"):
        load_image(text)
    data = encode_jpeg(studio_shot(np.random.default_rng(0), 200, 200).srgb8)
    cut = tmp_path / "cut.jpg"
    cut.write_bytes(data[: len(data) // 2])
    with pytest.raises(ImageError, match=r"cut\.jpg: cannot decode: file is truncated"):
        load_image(cut)


def test_pixel_cap():
    data = encode_png(np.zeros((100, 100, 3), np.uint8))
    with pytest.raises(ImageError, match=r"big\.png: image is 100x100 = 10000 pixels, over the limit of 9999"):
        decode_image(data, name="big.png", max_pixels=9999)


def _png_header_only(width, height):
    """A PNG that declares ``width`` x ``height`` RGB pixels but carries one tiny IDAT chunk
    (PNG specification, ISO/IEC 15948: signature, IHDR, IDAT, IEND, each with a CRC-32)."""
    import struct
    import zlib

    def chunk(kind, body):
        return struct.pack(">I", len(body)) + kind + body + struct.pack(">I", zlib.crc32(kind + body))

    ihdr = struct.pack(">IIBBBBB", width, height, 8, 2, 0, 0, 0)
    return (b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", ihdr) + chunk(b"IDAT", zlib.compress(b"\0" * 16))
            + chunk(b"IEND", b""))


def _no_decoding(monkeypatch):
    from PIL import ImageFile

    def refuse(self):
        raise AssertionError("pixels were decoded")

    monkeypatch.setattr(ImageFile.ImageFile, "load", refuse)


def test_declared_limit_is_pillows_bomb_threshold():
    # Pillow raises DecompressionBombError above twice its default MAX_IMAGE_PIXELS.
    assert MAX_DECLARED_PIXELS == 2 * Image.MAX_IMAGE_PIXELS and MAX_DECLARED_PIXELS > 3 * MAX_PIXELS


@pytest.mark.parametrize(
    "pillow_limit, reason",
    [
        (89_478_485, "declares more pixels than the limit of 178956970"),  # Pillow's own bomb error
        (None, "is 100000x100000 = 10000000000 pixels, over the limit of 178956970"),  # ours alone
    ],
)
def test_absurd_png_refused_without_decoding(monkeypatch, pillow_limit, reason):
    # A PNG declaring 10 gigapixels is refused from its header, also when an application has
    # switched Pillow's global check off; no pixel is decoded.
    _no_decoding(monkeypatch)
    monkeypatch.setattr(Image, "MAX_IMAGE_PIXELS", pillow_limit)
    with pytest.raises(ImageError, match=rf"^huge\.png: image {reason}$"):
        decode_image(_png_header_only(100_000, 100_000), name="huge.png")


def test_png_over_the_decoded_cap_refused_without_decoding(monkeypatch):
    # 60 MP PNG: under the declared limit, but PNG cannot be decoded at reduced scale.
    _no_decoding(monkeypatch)
    with pytest.raises(ImageError, match=r"^wide\.png: image is 10000x6000 = 60000000 pixels, over the "
                       r"limit of 50000000 decoded pixels$"):
        decode_image(_png_header_only(10_000, 6_000), name="wide.png")


def test_large_jpeg_decoded_at_reduced_scale():
    im = Image.new("RGB", (9000, 6000), (90, 120, 160))
    data = _save(im, "JPEG", quality=20)
    del im
    img = decode_image(data, name="master.jpg", max_side=128)
    assert (img.width, img.height) == (9000, 6000) and img.srgb8.shape == (85, 128, 3)
    # Decoded at full size it would be 54 MP, over the cap: refused before decoding.
    with pytest.raises(ImageError, match=r"master\.jpg: image is 9000x6000 = 54000000 pixels, over the "
                       r"limit of 50000000 decoded pixels"):
        decode_image(data, name="master.jpg", max_side=None)
    with pytest.raises(ImageError, match=r"\(decoded at 1125x750\), over the limit of 100000 decoded"):
        decode_image(data, name="master.jpg", max_side=128, max_pixels=100_000)

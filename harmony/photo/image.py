"""Decoding product photos into small 8-bit sRGB arrays, safely.

Handles EXIF orientation, embedded ICC profiles (converted to sRGB with Pillow's ImageCms),
alpha (transparent pixels are background), the common modes (RGB, RGBA, L, LA, P, PA, CMYK,
I;16, I, F, 1), JPEG draft mode (DCT-domain downscaling while decoding) and two limits against
decompression bombs: :data:`MAX_PIXELS` on what is actually decoded (a 9000x6000 JPEG master is
decoded at 1/8 scale, under 1 MP, so it passes), and :data:`MAX_DECLARED_PIXELS` on the size a
file declares, checked from the header before any pixel is decoded. Formats without
reduced-scale decoding (PNG, TIFF, ...) decode at full size, so for them the declared size must
itself be within :data:`MAX_PIXELS`. Every failure is an :class:`~harmony.errors.ImageError` whose message
starts with the file name.
"""

import hashlib
import io
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from PIL import Image, ImageCms, UnidentifiedImageError

from harmony.errors import ImageError

__all__ = [
    "MAX_PIXELS",
    "MAX_DECLARED_PIXELS",
    "DecodedImage",
    "sha256_file",
    "sha256_bytes",
    "read_source",
    "decode_image",
    "load_image",
]

#: Most pixels that are actually decoded (after JPEG draft-mode scaling): 50 megapixels, about
#: 150-200 MB as 8-bit RGB(A), below Pillow's own warning limit (about 89 MP), so the error is ours.
MAX_PIXELS = 50_000_000

#: Most pixels a file may declare in its header, whatever the decoded scale: Pillow's own
#: DecompressionBombError threshold, twice ``PIL.Image.MAX_IMAGE_PIXELS`` = 2 x 89,478,485
#: (Pillow's default, documented in its ``Image.open`` reference). It admits the largest single
#: studio captures (medium-format backs of about 150 MP); checked by this module too, so it holds
#: even when an application raises or disables Pillow's global.
MAX_DECLARED_PIXELS = 178_956_970

#: EXIF tag 274 (0x0112) "Orientation" and the transposition that displays each value upright,
#: per CIPA DC-008 (Exif 2.32), section 4.6.5: 1 = as stored, 3 = rotated 180 degrees,
#: 6 = needs 90 degrees clockwise, 8 = needs 90 degrees counter-clockwise, 2/4/5/7 mirrored.
EXIF_ORIENTATION_TAG = 0x0112
_TRANSPOSE = {
    2: Image.Transpose.FLIP_LEFT_RIGHT,
    3: Image.Transpose.ROTATE_180,
    4: Image.Transpose.FLIP_TOP_BOTTOM,
    5: Image.Transpose.TRANSPOSE,
    6: Image.Transpose.ROTATE_270,
    7: Image.Transpose.TRANSVERSE,
    8: Image.Transpose.ROTATE_90,
}

_SRGB_PROFILE = None


def _srgb_profile():
    global _SRGB_PROFILE
    if _SRGB_PROFILE is None:
        _SRGB_PROFILE = ImageCms.createProfile("sRGB")
    return _SRGB_PROFILE


@dataclass(frozen=True, eq=False)
class DecodedImage:
    """A photo decoded for colour analysis.

    Attributes
    ----------
    srgb8 : ndarray, shape (h, w, 3), uint8
        sRGB pixels at working scale, upright.
    opaque : ndarray, shape (h, w), bool, or None
        False where the pixel is transparent (alpha below one half); None when the image has no alpha.
    width, height : int
        Size of the stored image after EXIF orientation (not the working scale).
    sha256 : str
        Hex digest of the file's bytes.
    source : str
        Name of the file, for messages.
    """

    srgb8: np.ndarray
    opaque: np.ndarray | None
    width: int
    height: int
    sha256: str
    source: str


def _read_error(name, exc):
    """The ImageError for an OSError raised while reading file ``name``."""
    if isinstance(exc, FileNotFoundError):
        return ImageError(f"{name}: no such file")
    if isinstance(exc, IsADirectoryError):
        return ImageError(f"{name}: is a directory, not an image")
    return ImageError(f"{name}: cannot read: {exc.strerror or exc}")


def sha256_bytes(data):
    """Hex SHA-256 digest of ``data`` (FIPS 180-4)."""
    return hashlib.sha256(data).hexdigest()


def sha256_file(path):
    """Hex SHA-256 digest of a file's bytes; raises ImageError("<file>: <reason>") if unreadable."""
    digest = hashlib.sha256()
    try:
        with open(path, "rb") as fh:
            for block in iter(lambda: fh.read(1 << 20), b""):
                digest.update(block)
    except OSError as exc:
        raise _read_error(path, exc) from None
    return digest.hexdigest()


def read_source(source):
    """Return ``(bytes, name)`` for a path (str or Path) or raw bytes."""
    if isinstance(source, (bytes, bytearray, memoryview)):
        return bytes(source), "<bytes>"
    if not isinstance(source, (str, Path)):
        raise ImageError(f"{source!r}: expected a file path or bytes, got {type(source).__name__}")
    name = str(source)
    try:
        return Path(source).read_bytes(), name
    except OSError as exc:
        raise _read_error(name, exc) from None


def _orientation(img):
    try:
        value = img.getexif().get(EXIF_ORIENTATION_TAG, 1)
    except Exception:  # a broken EXIF block must not stop the photo being read
        return 1
    return value if value in _TRANSPOSE else 1


def _to_8bit_grey(img):
    """Integer and float grey modes (I;16, I, F) to 8-bit L."""
    arr = np.asarray(img)
    if img.mode.startswith("I;16"):
        scaled = arr.astype(np.float64) / 257.0  # 65535 -> 255
    else:
        arr = arr.astype(np.float64)
        top = 255.0 if arr.max(initial=0) <= 255 else 65535.0
        scaled = np.clip(arr, 0, top) * (255.0 / top)
    return Image.fromarray(np.rint(scaled).astype(np.uint8), "L")


def _to_rgb_and_alpha(img, name):
    """Split into an RGB image in sRGB and an alpha array (or None)."""
    icc = img.info.get("icc_profile")
    mode = img.mode
    alpha = None
    if mode == "P":
        img = img.convert("RGBA" if "transparency" in img.info else "RGB")
    elif mode in ("PA", "LA", "La", "RGBa"):
        img = img.convert("RGBA")
    elif mode == "L" and "transparency" in img.info:
        img = img.convert("RGBA")
    elif mode.startswith("I") or mode == "F":
        img = _to_8bit_grey(img)
    elif mode == "1":
        img = img.convert("L")
    if img.mode == "RGBA":
        alpha = np.asarray(img.getchannel("A"))
        img = img.convert("RGB")
    if icc and img.mode in ("RGB", "L", "CMYK"):
        try:
            src = ImageCms.ImageCmsProfile(io.BytesIO(icc))
            img = ImageCms.profileToProfile(img, src, _srgb_profile(), outputMode="RGB")
        except (ImageCms.PyCMSError, OSError, ValueError) as exc:
            raise ImageError(f"{name}: embedded ICC profile cannot be used: {exc}") from None
    if img.mode != "RGB":
        img = img.convert("RGB")
    return img, alpha


def decode_image(data, name="<bytes>", max_side=200, max_pixels=MAX_PIXELS, sha256=None):
    """Decode image bytes to a small upright sRGB array.

    Parameters
    ----------
    data : bytes
        The encoded file.
    name : str
        The file name used in error messages.
    max_side : int or None
        Long side of the working image; JPEGs are decoded at the smallest DCT scale (1/2, 1/4,
        1/8) that is still at least this large, then box-filtered down. None keeps full size.
    max_pixels : int
        Refuse images that would decode to more pixels than this (decompression-bomb guard):
        for a JPEG the size after draft-mode scaling, for other formats the declared size. A
        declared size over :data:`MAX_DECLARED_PIXELS` is refused in every case.
    sha256 : str, optional
        Precomputed digest of ``data``.

    Returns
    -------
    DecodedImage

    Raises
    ------
    ImageError
        Not an image, truncated or corrupt, over a pixel limit, or an unusable ICC profile.
    """
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", Image.DecompressionBombWarning)
            img = Image.open(io.BytesIO(data))
    except UnidentifiedImageError:
        raise ImageError(f"{name}: not an image (unrecognised format)") from None
    except Image.DecompressionBombError:
        raise ImageError(
            f"{name}: image declares more pixels than the limit of {MAX_DECLARED_PIXELS}"
        ) from None
    except (OSError, SyntaxError, ValueError) as exc:
        raise ImageError(f"{name}: cannot decode: {exc}") from None
    w, h = img.size
    if w * h > MAX_DECLARED_PIXELS:
        raise ImageError(
            f"{name}: image is {w}x{h} = {w * h} pixels, over the limit of {MAX_DECLARED_PIXELS}"
        )
    if w == 0 or h == 0:
        raise ImageError(f"{name}: image is empty ({w}x{h})")
    orientation = _orientation(img)
    try:
        if max_side is not None and img.format == "JPEG" and max(w, h) > max_side:
            scale = max_side / max(w, h)
            img.draft(img.mode, (max(1, int(np.ceil(w * scale))), max(1, int(np.ceil(h * scale)))))
        dw, dh = img.size  # the size that will be decoded (draft mode changes it)
        if dw * dh > max_pixels:
            scaled = "" if (dw, dh) == (w, h) else f" (decoded at {dw}x{dh})"
            raise ImageError(
                f"{name}: image is {w}x{h} = {w * h} pixels{scaled}, over the limit of {max_pixels}"
                " decoded pixels"
            )
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", Image.DecompressionBombWarning)
            img.load()
        rgb, alpha = _to_rgb_and_alpha(img, name)
    except ImageError:
        raise
    except Image.DecompressionBombError:
        raise ImageError(
            f"{name}: image declares more pixels than the limit of {MAX_DECLARED_PIXELS}"
        ) from None
    except (OSError, SyntaxError, ValueError, EOFError) as exc:
        reason = str(exc) or type(exc).__name__
        if "truncated" in reason.lower() or isinstance(exc, EOFError):
            reason = "file is truncated"
        raise ImageError(f"{name}: cannot decode: {reason}") from None
    if max_side is not None and max(rgb.size) > max_side:
        scale = max_side / max(rgb.size)
        size = (max(1, round(rgb.width * scale)), max(1, round(rgb.height * scale)))
        rgb = rgb.resize(size, Image.Resampling.BOX)
        if alpha is not None:
            alpha = np.asarray(Image.fromarray(alpha, "L").resize(size, Image.Resampling.BOX))
    if orientation != 1:
        rgb = rgb.transpose(_TRANSPOSE[orientation])
        if alpha is not None:
            alpha = np.asarray(Image.fromarray(alpha, "L").transpose(_TRANSPOSE[orientation]))
    if orientation in (5, 6, 7, 8):
        w, h = h, w
    srgb8 = np.asarray(rgb, dtype=np.uint8)
    opaque = None if alpha is None else np.asarray(alpha) >= 128
    return DecodedImage(
        srgb8=srgb8,
        opaque=opaque,
        width=int(w),
        height=int(h),
        sha256=sha256 if sha256 is not None else sha256_bytes(data),
        source=name,
    )


def load_image(source, max_side=200, max_pixels=MAX_PIXELS):
    """Read and decode a path (str/Path) or bytes; see :func:`decode_image`."""
    data, name = read_source(source)
    return decode_image(data, name=name, max_side=max_side, max_pixels=max_pixels)

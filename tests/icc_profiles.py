"""Small ICC v2 RGB display profiles built byte by byte, for testing colour management.

A matrix/TRC ("three-component matrix-based") display profile maps device RGB to the profile
connection space (PCS) CIE XYZ with one tone curve per channel followed by a 3x3 matrix whose
columns are the red, green and blue colorants::

    XYZ_PCS = [rXYZ gXYZ bXYZ] @ [TRC_r(R), TRC_g(G), TRC_b(B)]

The colorants are PCS values, i.e. relative to the D50 PCS illuminant: a display whose white
is D65 has its primaries chromatically adapted to D50 before they are stored.

Layout follows ICC.1:2001-04 "File Format for Color Profiles" (profile version 2.4) and the same
structures as they stand in ICC.1:2010 (profile version 4.3): a 128-byte header, a tag table
(count, then signature / offset / size for each tag) and the tag data, each element starting on a
4-byte boundary. The clause numbers below are those of ICC.1:2010 (the v2 text numbers them
differently); they were written down from knowledge of the specification, not re-checked
against a copy while writing this module:

- 4.6 s15Fixed16Number, 4.9 u8Fixed8Number, 4.14 XYZNumber, 4.2 dateTimeNumber (all big-endian);
- 7.2 profile header: 7.2.2 size, 7.2.4 version, 7.2.5 class 'mntr', 7.2.6 data colour space
  'RGB ', 7.2.7 PCS 'XYZ ', 7.2.9 file signature 'acsp', 7.2.16 PCS illuminant (D50);
- 7.3 tag table; 8.5 (display profiles) lists the tags a matrix-based display profile needs:
  description, media white point, copyright, the three matrix columns and the three TRCs;
- 10.5 curveType ('curv' with one entry = a pure gamma as u8Fixed8Number), 10.29 XYZType,
  10.22 textType (the v2 type of 'cprt'); the v2 description uses textDescriptionType ('desc'),
  defined only in the v2 specification (ICC.1:2001-04, tag type definitions).

Notes
-----
The PCS illuminant is the ICC's D50, XYZ = (0.9642, 1.0, 0.8249) (ICC.1:2010 7.2.16), which
s15Fixed16Number stores as 0x0000F6D6, 0x00010000, 0x0000D32D.
"""

import struct

import numpy as np

__all__ = [
    "ICC_D50_XYZ",
    "matrix_trc_display_profile",
    "s15fixed16",
    "u8fixed8",
]

#: PCS illuminant, CIE XYZ with Y = 1: ICC.1:2010 clause 7.2.16 (the same in ICC.1:2001-04).
ICC_D50_XYZ = (0.9642, 1.0, 0.8249)

_HEADER_SIZE = 128
_TAG_ENTRY_SIZE = 12


def s15fixed16(value):
    """Encode a number as an ICC s15Fixed16Number: a signed 32-bit big-endian integer / 65536.

    The representable range is -32768.0 to 32767 + 65535/65536 (ICC.1:2010 clause 4.6); the
    value is rounded to the nearest step of 1/65536.

    Raises
    ------
    ValueError
        The value is not finite or is outside the representable range.
    """
    value = float(value)
    steps = round(value * 65536.0) if np.isfinite(value) else None
    if steps is None or not -(2**31) <= steps <= 2**31 - 1:
        raise ValueError(f"{value!r} is outside the s15Fixed16Number range [-32768, 32768)")
    return struct.pack(">i", steps)


def u8fixed8(value):
    """Encode a number as an ICC u8Fixed8Number (unsigned 16-bit / 256; ICC.1:2010 clause 4.9)."""
    value = float(value)
    steps = round(value * 256.0) if np.isfinite(value) else None
    if steps is None or not 0 <= steps <= 0xFFFF:
        raise ValueError(f"{value!r} is outside the u8Fixed8Number range [0, 256)")
    return struct.pack(">H", steps)


def _xyz_type(xyz):
    """XYZType: 'XYZ ', 4 reserved bytes, one XYZNumber (three s15Fixed16Number)."""
    return b"XYZ " + bytes(4) + b"".join(s15fixed16(v) for v in xyz)


def _gamma_curve_type(gamma):
    """curveType with a single entry: a pure power law, the exponent as u8Fixed8Number."""
    return b"curv" + bytes(4) + struct.pack(">I", 1) + u8fixed8(gamma)


def _text_type(text):
    """textType (v2 'cprt'): 'text', 4 reserved bytes, 7-bit ASCII ending in a NUL."""
    return b"text" + bytes(4) + text.encode("ascii") + b"\0"


def _text_description_type(text):
    """v2 textDescriptionType: ASCII part, empty Unicode part, empty 67-byte ScriptCode part."""
    ascii_z = text.encode("ascii") + b"\0"
    return (
        b"desc"
        + bytes(4)
        + struct.pack(">I", len(ascii_z))
        + ascii_z
        + struct.pack(">II", 0, 0)  # Unicode language code, Unicode character count
        + struct.pack(">HB", 0, 0)  # ScriptCode code, ScriptCode count
        + bytes(67)  # ScriptCode description, fixed length
    )


def _pad4(data):
    return data + bytes(-len(data) % 4)


def _header(size):
    """The 128-byte v2.4 header of an RGB display profile with an XYZ PCS."""
    header = (
        struct.pack(">I", size)  # 0-3 profile size in bytes
        + bytes(4)  # 4-7 preferred CMM: none
        + struct.pack(">I", 0x02400000)  # 8-11 version 2.4.0
        + b"mntr"  # 12-15 profile/device class: display device
        + b"RGB "  # 16-19 data colour space
        + b"XYZ "  # 20-23 profile connection space
        + struct.pack(">6H", 2024, 1, 1, 0, 0, 0)  # 24-35 creation date and time (UTC)
        + b"acsp"  # 36-39 profile file signature
        + bytes(4)  # 40-43 primary platform: none
        + struct.pack(">I", 0)  # 44-47 flags: not embedded-only, usable independently
        + bytes(4)  # 48-51 device manufacturer
        + bytes(4)  # 52-55 device model
        + bytes(8)  # 56-63 device attributes: reflective, glossy, positive, colour
        + struct.pack(">I", 0)  # 64-67 rendering intent: perceptual
        + b"".join(s15fixed16(v) for v in ICC_D50_XYZ)  # 68-79 PCS illuminant
        + bytes(4)  # 80-83 profile creator
    )
    return header + bytes(_HEADER_SIZE - len(header))  # 84-127 reserved (v2), zero


def matrix_trc_display_profile(colorants_xyz, gamma, description, copyright_text="No copyright, test data"):
    """Build an ICC v2.4 RGB matrix/TRC display profile.

    Parameters
    ----------
    colorants_xyz : array_like, shape (3, 3)
        Matrix from linear device RGB to PCS XYZ (Y of white = 1): column 0 is the red colorant
        (rXYZ), column 1 green (gXYZ), column 2 blue (bXYZ), all already adapted to D50.
    gamma : float
        Exponent of the three tone curves (stored with a step of 1/256, so 2.2 is 563/256).
    description : str
        ASCII profile description ('desc').
    copyright_text : str
        ASCII copyright text ('cprt').

    Returns
    -------
    bytes
        The complete profile.

    Raises
    ------
    ValueError
        ``colorants_xyz`` is not 3x3 or a number cannot be encoded.

    Notes
    -----
    The media white point ('wtpt') is written as the sum of the colorants, which is D50 when the
    colorants were adapted from a display white to D50 and normalised to Y = 1 (ICC.1:2010
    clause 9.2.34, mediaWhitePointTag, asks for the PCS value of the media white).
    """
    m = np.asarray(colorants_xyz, dtype=float)
    if m.shape != (3, 3):
        raise ValueError(f"colorants_xyz must have shape (3, 3), got {m.shape}")
    trc = _gamma_curve_type(gamma)
    tags = [
        (b"desc", _text_description_type(description)),
        (b"wtpt", _xyz_type(m.sum(axis=1))),
        (b"rXYZ", _xyz_type(m[:, 0])),
        (b"gXYZ", _xyz_type(m[:, 1])),
        (b"bXYZ", _xyz_type(m[:, 2])),
        (b"rTRC", trc),
        (b"gTRC", trc),
        (b"bTRC", trc),
        (b"cprt", _text_type(copyright_text)),
    ]
    offset = _HEADER_SIZE + 4 + _TAG_ENTRY_SIZE * len(tags)
    table = [struct.pack(">I", len(tags))]
    body = []
    for signature, data in tags:
        table.append(signature + struct.pack(">II", offset, len(data)))
        body.append(_pad4(data))
        offset += len(body[-1])
    payload = b"".join(table) + b"".join(body)
    return _header(_HEADER_SIZE + len(payload)) + payload

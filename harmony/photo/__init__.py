"""Photos to palettes: decoding (EXIF, ICC, alpha, size caps), backdrop and shadow masking, the
weighted palette, and swatch pictures.

May import :mod:`harmony.colour`, :mod:`harmony.errors` and :mod:`harmony.fileio`; nothing above.
"""

"""Decode the PNG data URLs of image elements, with size and pixel caps."""

from __future__ import annotations

import base64
import binascii
import io

import numpy as np

__all__ = ["MAX_IMAGE_BYTES", "MAX_IMAGE_PIXELS", "PngDataError", "decode_png_data_url"]

#: Largest PNG of an image element. In a snapshot it travels as base64 (4/3 larger):
#: 3 MB of PNG is 4 MB of text, which leaves 1 MB of the 5 MB snapshot cap
#: (compute.snapshot.MAX_SNAPSHOT_BYTES) for the rest of the file.
MAX_IMAGE_BYTES = 3 * 1024 * 1024
MAX_IMAGE_PIXELS = 2048 * 2048
_PREFIX = "data:image/png;base64,"
_PNG_MAGIC = b"\x89PNG\r\n\x1a\n"


class PngDataError(ValueError):
    """The payload is not a usable PNG; the message says why."""


def decode_png_data_url(url: str) -> np.ndarray:
    """Return the grey level of a PNG data URL as float64 in [0, 1], shape (h, w).

    Row 0 of the result is the top row of the picture. Colour pictures are
    reduced to their luminance; an alpha channel multiplies the grey level.

    Raises
    ------
    PngDataError
        When the text is no PNG data URL, the payload is not a PNG, or it is
        larger than :data:`MAX_IMAGE_BYTES` or :data:`MAX_IMAGE_PIXELS`.
    """
    if not isinstance(url, str) or not url.startswith(_PREFIX):
        raise PngDataError("expected a data URL starting with 'data:image/png;base64,'")
    payload = url[len(_PREFIX) :]
    if len(payload) > MAX_IMAGE_BYTES * 4 // 3 + 4:
        raise PngDataError(f"image payload is over {MAX_IMAGE_BYTES // (1024 * 1024)} MB")
    try:
        raw = base64.b64decode(payload, validate=True)
    except (binascii.Error, ValueError):
        raise PngDataError("image payload is not valid base64") from None
    if not raw.startswith(_PNG_MAGIC):
        raise PngDataError("image payload is not a PNG")
    from PIL import Image as PILImage

    try:
        with PILImage.open(io.BytesIO(raw)) as img:
            w, h = img.size
            if w * h > MAX_IMAGE_PIXELS:
                raise PngDataError(
                    f"image is {w}×{h} pixels; at most {MAX_IMAGE_PIXELS} pixels are allowed"
                )
            if img.format != "PNG":
                raise PngDataError("image payload is not a PNG")
            if "A" in img.getbands():
                rgba = np.asarray(img.convert("RGBA"), dtype=np.float64) / 255.0
                grey = (
                    0.2126 * rgba[..., 0] + 0.7152 * rgba[..., 1] + 0.0722 * rgba[..., 2]
                ) * rgba[..., 3]
            elif img.mode in ("1", "L", "I", "I;16", "F"):
                arr = np.asarray(img, dtype=np.float64)
                top = {"1": 1.0, "L": 255.0}.get(img.mode, float(arr.max()) or 1.0)
                grey = arr / top
            else:
                rgb = np.asarray(img.convert("RGB"), dtype=np.float64) / 255.0
                grey = 0.2126 * rgb[..., 0] + 0.7152 * rgb[..., 1] + 0.0722 * rgb[..., 2]
    except PngDataError:
        raise
    except Exception as exc:  # Pillow raises many kinds for corrupt data
        raise PngDataError(f"image payload could not be decoded as PNG ({exc})") from None
    return np.clip(grey, 0.0, 1.0)


def encode_png_data_url(grey: np.ndarray) -> str:
    """Encode a grey-level array in [0, 1] (row 0 on top) as an 8-bit PNG data URL."""
    from PIL import Image as PILImage

    arr = np.clip(np.round(np.asarray(grey, dtype=np.float64) * 255.0), 0, 255).astype(np.uint8)
    buf = io.BytesIO()
    PILImage.fromarray(arr, mode="L").save(buf, format="PNG")
    return _PREFIX + base64.b64encode(buf.getvalue()).decode("ascii")

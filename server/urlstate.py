"""A setup in the page address: ``?s=`` holds the compressed canonical snapshot.

The value is the snapshot JSON (keys sorted, no spaces), compressed with zlib
and written as base64url without padding, so that a copied link opens the
same setup and view. Decoding is strict: a damaged or oversized value raises
:class:`UrlStateError` with a plain message and never a traceback.
"""

from __future__ import annotations

import base64
import binascii
import json
import zlib

from compute import snapshot
from compute.model import Setup

__all__ = [
    "MAX_QUERY_CHARS",
    "QUERY_KEY",
    "UrlStateError",
    "decode_setup",
    "encode_setup",
]

QUERY_KEY = "s"
#: Longest value mirrored into the address; browsers and proxies cut longer ones.
MAX_QUERY_CHARS = 32_000
_MAX_JSON_BYTES = snapshot.MAX_SNAPSHOT_BYTES


class UrlStateError(ValueError):
    """The setup in the address cannot be read; the message says why in plain words."""


def encode_setup(setup: Setup) -> str:
    """The ``?s=`` value of ``setup`` (with its ``meta`` and ``view``)."""
    doc = snapshot.to_dict(setup)
    text = json.dumps(doc, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    packed = zlib.compress(text.encode("utf-8"), 9)
    return base64.urlsafe_b64encode(packed).decode("ascii").rstrip("=")


def decode_setup(value: str | bytes) -> Setup:
    """Read the setup back from a ``?s=`` value.

    Raises
    ------
    UrlStateError
        When the value is too long, not base64url, not compressed snapshot data,
        or the snapshot inside is invalid (every problem is listed).
    """
    if isinstance(value, bytes):
        value = value.decode("ascii", errors="replace")
    value = value.strip()
    if not value:
        raise UrlStateError("the link carries an empty setup")
    if len(value) > MAX_QUERY_CHARS:
        raise UrlStateError(
            f"the setup in the link is {len(value)} characters long; at most "
            f"{MAX_QUERY_CHARS} are read"
        )
    try:
        packed = base64.urlsafe_b64decode(value + "=" * (-len(value) % 4))
    except (binascii.Error, ValueError):
        raise UrlStateError("the setup in the link is damaged (not base64url text)") from None
    inflater = zlib.decompressobj()
    try:
        raw = inflater.decompress(packed, _MAX_JSON_BYTES + 1)
    except zlib.error:
        raise UrlStateError("the setup in the link is damaged (not compressed data)") from None
    if len(raw) > _MAX_JSON_BYTES or inflater.unconsumed_tail:
        raise UrlStateError("the setup in the link unpacks to more than a snapshot may hold")
    if not inflater.eof:
        raise UrlStateError("the setup in the link is cut short; copy the whole link")
    try:
        return snapshot.loads(raw, source="link")
    except snapshot.SnapshotError as exc:
        problems = "; ".join(f"{p}: {m}" if p else m for p, m in exc.errors[:5])
        more = f" (and {len(exc.errors) - 5} more)" if len(exc.errors) > 5 else ""
        raise UrlStateError(f"the setup in the link is not valid: {problems}{more}") from None

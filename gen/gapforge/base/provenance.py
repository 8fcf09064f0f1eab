"""Provenance hashes of what a file means, not how its bytes happen to be stored (issue 11).

A header records a SHA-256 of each input (design, layout). Hashing the raw bytes made every
header "stale" after a checkout converted line endings (CRLF on Windows) or an editor added a
byte-order mark. Here the hash is of the parsed TOML content in one canonical form: JSON with
sorted keys, no insignificant whitespace, UTF-8, every TOML type tagged where JSON would blur it
(dates and times as tagged ISO text). So comments, key order, spacing, quoting style, line
endings and a byte-order mark do not change the hash; any change to a value, which could change
the output, does.
"""

from __future__ import annotations

import datetime
import hashlib
import json
from typing import Any

CANONICAL_FORM = 1  # bump if the canonical text below ever changes


def _tagged(value: Any) -> Any:
    if isinstance(value, datetime.datetime):
        return {"$datetime": value.isoformat()}
    if isinstance(value, datetime.date):
        return {"$date": value.isoformat()}
    if isinstance(value, datetime.time):
        return {"$time": value.isoformat()}
    raise TypeError(f"not a TOML value: {type(value).__name__}")


def canonical_text(data: dict[str, Any]) -> str:
    return json.dumps(data, sort_keys=True, ensure_ascii=False, separators=(",", ":"),
                      default=_tagged)


def content_sha256(data: dict[str, Any]) -> str:
    """SHA-256 (hex) of the canonical form of a parsed TOML document."""
    return hashlib.sha256(canonical_text(data).encode("utf-8")).hexdigest()

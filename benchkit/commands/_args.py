"""Argument helpers shared by several commands."""

from __future__ import annotations

import tomllib
from typing import Any


def parse_key_value(text: str, flag: str, error: type[Exception]) -> tuple[str, Any]:
    """``KEY=VALUE`` -> (key, value); the value is read as a TOML value, else kept as text.

    Raises ``error`` naming ``flag`` when ``text`` is not of that form.
    """
    key, eq, raw = text.partition("=")
    key = key.strip()
    if not eq or not key:
        raise error(f"{flag} {text!r}: expected KEY=VALUE")
    try:
        value = tomllib.loads(f"v = {raw.strip()}")["v"]
    except tomllib.TOMLDecodeError:
        value = raw.strip()
    return key, value

"""Names the job gives that become file names: sanitised one way everywhere (corner
names, configuration names, the job's name)."""

from __future__ import annotations

import re

__all__ = ["safe_filename"]

_UNSAFE = re.compile(r"[^A-Za-z0-9._+-]")


def safe_filename(name: str) -> str:
    """A file-name-safe form of ``name`` (a corner or job name): no separators, dots-only or
    controls; at most 120 characters."""
    cleaned = _UNSAFE.sub("_", name).strip("._") or "unnamed"
    return cleaned[:120]

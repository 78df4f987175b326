"""Path-safe names for reach ids and event names (they become folder and file names)."""
from __future__ import annotations

import re


def safe_name(text: str) -> str:
    """Letters, digits, '_', '-' and '.' only; anything else becomes '_'."""
    return re.sub(r"[^A-Za-z0-9_.-]+", "_", str(text)).strip("._") or "reach"

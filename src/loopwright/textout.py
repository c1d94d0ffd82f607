"""Plain-text tables for the terminal (engineering notation, aligned columns)."""

from __future__ import annotations

import json
import math
from collections.abc import Sequence

import numpy as np

from .quantities import format_eng

__all__ = ["table", "roots_text", "to_json"]


def table(
    headers: Sequence[str],
    rows: Sequence[Sequence[str]],
    *,
    indent: str = "",
    left_last: bool = False,
) -> str:
    """Left-aligned first column (and last, with ``left_last``), right-aligned others."""
    widths = [len(h) for h in headers]
    for r in rows:
        widths = [max(w, len(c)) for w, c in zip(widths, r, strict=True)]

    def line(cells):
        out = []
        for i, (c, w) in enumerate(zip(cells, widths, strict=True)):
            left = i == 0 or (i == len(widths) - 1 and left_last)
            out.append(c.ljust(w) if left else c.rjust(w))
        return indent + "  ".join(out).rstrip()

    sep = indent + "  ".join("-" * w for w in widths)
    return "\n".join([line(headers), sep, *(line(r) for r in rows)])


def roots_text(roots_hz: Sequence[complex], limit: int = 6) -> str:
    """Compact list of s-plane roots in Hz: ``-1.2 kHz``, ``-400 Hz ± j3.4 kHz``."""
    parts = []
    seen_conj = set()
    for i, r in enumerate(roots_hz):
        if i in seen_conj:
            continue
        if abs(r.imag) > 1e-9 * abs(r):
            # pair with its conjugate
            for j in range(i + 1, len(roots_hz)):
                if abs(roots_hz[j] - r.conjugate()) < 1e-6 * abs(r):
                    seen_conj.add(j)
                    break
            parts.append(f"{format_eng(r.real, 'Hz', 3)} ± j{format_eng(abs(r.imag), 'Hz', 3)}")
        else:
            parts.append(format_eng(r.real, "Hz", 3))
    if len(parts) > limit:
        parts = parts[:limit] + ["..."]
    return ", ".join(parts) if parts else "none"


def _clean(o):
    if isinstance(o, dict):
        return {k: _clean(v) for k, v in o.items()}
    if isinstance(o, list | tuple):
        return [_clean(v) for v in o]
    if isinstance(o, np.generic):
        o = o.item()
    if isinstance(o, float) and not math.isfinite(o):
        return None if math.isnan(o) else ("inf" if o > 0 else "-inf")
    if isinstance(o, complex):
        return [o.real, o.imag]
    if isinstance(o, np.ndarray):
        return _clean(o.tolist())
    return o


def to_json(obj) -> str:
    """Strict JSON (NaN -> null, inf -> "inf")."""
    return json.dumps(_clean(obj), indent=2, allow_nan=False)

"""What the terminal says about each reach: flag counts per event and whether it needs review.

Pure pandas/numpy over the rows of profile.csv (no file I/O).

A reach *needs review* (instead of a plain "ok") when, in some event, more than half of its
sections spill over an end that does not meet another reach's area (where it does, the other
reach maps that water and the spill is expected), or a level could not be solved (no_convergence).
"""
from __future__ import annotations

from collections import Counter

import pandas as pd

from ..flags import describe
from ..outputs.tables import OTHER_REACH_WORDS, SPILL_WORDS

REVIEW_SPILL_SHARE = 0.5


def event_summary(rows: pd.DataFrame) -> dict:
    """{"sections", "flags" {word: sections}, "spilling" (sections spilling over an end that meets no
    other reach), "spill_max_m" (the highest such spill)} of one reach and event."""
    counts: Counter = Counter()
    spilling, top = 0, 0.0
    cols = ("spill_left_m", "spill_right_m")
    for _, row in rows.iterrows():
        present = set(filter(None, str(row.get("flags") or "").split(";")))
        counts.update(present)
        free = [c for c, s, o in zip(cols, SPILL_WORDS, OTHER_REACH_WORDS) if s in present and o not in present]
        spilling += bool(free)
        top = max([top] + [float(row[c]) for c in free if c in row and pd.notna(row[c])])
    return {"sections": int(len(rows)), "flags": dict(sorted(counts.items())), "spilling": int(spilling),
            "spill_max_m": round(top, 3)}


def verdict(entry: dict) -> str:
    """"ok", "needs review (...)" or "FAILED: ..." for one reach's manifest entry."""
    if entry.get("status") != "complete":
        return f"FAILED: {entry.get('error')}"
    reasons = []
    for ev, unit in (entry.get("events") or {}).items():
        n, spill = unit.get("sections", 0), unit.get("spilling", 0)
        if n and spill > REVIEW_SPILL_SHARE * n:
            reasons.append(f"{ev}: {spill} of {n} sections spill over a free end, up to {unit.get('spill_max_m', 0):.2f} "
                           "m; widen the sections ([sections] width)")
        if (unit.get("flags") or {}).get("no_convergence"):
            reasons.append(f"{ev}: {unit['flags']['no_convergence']} section(s) where the energy balance did not close")
    return "ok" if not reasons else "needs review (" + "; ".join(reasons) + ")"


def flag_lines(entry: dict) -> list[str]:
    """One line per event: '<event>: word count, ...' (hydraulic facts first, then tool, input and
    information words), and how many sections spill over a free end; no line when nothing is flagged."""
    order = {"hydraulic": 0, "tool": 1, "input": 2, "info": 3}
    out = []
    for ev, unit in (entry.get("events") or {}).items():
        flags = unit.get("flags") or {}
        if not flags:
            continue
        words = sorted(flags, key=lambda w: (order.get(describe(w).kind, 4), w))
        line = f"{ev}: " + ", ".join(f"{w} {flags[w]}" for w in words)
        if unit.get("spilling"):
            line += f" ({unit['spilling']} spill over an end that meets no other reach, up to {unit['spill_max_m']:.2f} m)"
        out.append(line)
    return out

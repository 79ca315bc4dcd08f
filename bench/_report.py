"""The closing lines every benchmark prints: agreement verdict and the RESULT line.

Imported by the scripts beside it (``python bench/NAME.py`` puts this folder on sys.path).
"""
from __future__ import annotations

import sys


def finish(ours_s: float, baseline_s: float, ok: bool, disagreement: str, extras: str = "",
           digits: int = 3) -> int:
    """Print the verdict and ``RESULT seconds=... baseline_seconds=... speedup=... <extras>``; exit status."""
    if not ok:
        print(f"DISAGREEMENT: {disagreement}", file=sys.stderr)
    print(f"RESULT seconds={ours_s:.{digits}f} baseline_seconds={baseline_s:.{digits}f} "
          f"speedup={baseline_s / ours_s:.1f}" + (f" {extras}" if extras else ""))
    return 0 if ok else 1

"""Run every benchmarks/bench_*.py (or the areas named: ``python -m benchmarks archive``)
and print one table of what each measured. Exits 0; the ``ok`` column says what met its target."""

from __future__ import annotations

import importlib
import sys
import traceback
from pathlib import Path


def main(argv: list[str]) -> int:
    areas = sorted(p.stem[len("bench_"):] for p in Path(__file__).parent.glob("bench_*.py"))
    unknown = [a for a in argv if a not in areas]
    if unknown:
        print(f"unknown benchmark {unknown[0]!r}; expected one of: {', '.join(areas)}", file=sys.stderr)
        return 2
    rows = []
    for area in argv or areas:
        print(f"running {area} ...", file=sys.stderr, flush=True)
        try:
            for name, value, unit, target, ok in importlib.import_module(f"benchmarks.bench_{area}").run():
                rows.append((area, name, f"{value:.4g}" if isinstance(value, float) else str(value),
                             unit, str(target), "ok" if ok else "MISSED"))
        except Exception:                     # one broken benchmark must not hide the others
            traceback.print_exc()
            rows.append((area, "(failed: see traceback above)", "", "", "", "ERROR"))
    head = ("area", "figure", "value", "unit", "target", "")
    widths = [max(len(r[i]) for r in rows + [head]) for i in range(len(head))]
    for r in [head] + rows:
        print("  ".join(c.ljust(w) if i != 2 else c.rjust(w) for i, (c, w) in enumerate(zip(r, widths))).rstrip())
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))

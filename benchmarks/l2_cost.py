"""Cost of l2 against one plain evaluation, per call, on M1-M3 (measured in one run).

Prints microseconds per call (wall and CPU) for ``ev()``, ``ev(l2=True)`` and the ratio,
so the ratio is what to compare on a shared machine. Run: python benchmarks/l2_cost.py
"""

from __future__ import annotations

import time
from functools import partial
from pathlib import Path

import lyacomp

MODELS = sorted((Path(__file__).parent / "models").glob("m*.toml"))
CALLS = 2000


def _per_call(fn) -> tuple[float, float]:
    fn()
    wall, cpu = time.perf_counter(), time.process_time()
    for _ in range(CALLS):
        fn()
    return (time.perf_counter() - wall) / CALLS * 1e6, (time.process_time() - cpu) / CALLS * 1e6


def main() -> None:
    for path in MODELS:
        ev = lyacomp.compile(path)
        plain = _per_call(ev)
        with_l2 = _per_call(partial(ev, l2=True))
        print(
            f"{path.stem}: ev() {plain[0]:.1f} us wall / {plain[1]:.1f} us CPU; "
            f"ev(l2=True) {with_l2[0]:.1f} us wall / {with_l2[1]:.1f} us CPU; "
            f"ratio {with_l2[1] / plain[1]:.2f} (CPU)"
        )


if __name__ == "__main__":
    main()

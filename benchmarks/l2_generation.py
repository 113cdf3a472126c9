"""Generation cost of the l2 kernel: derive + lower with and without it, on M1-M3.

Prints wall and CPU seconds of each part and their ratio (measured in the same run; the
machine is shared, so compare ratios, not absolute times), and the size of the C source.
Run: python benchmarks/l2_generation.py
"""

from __future__ import annotations

import time
from pathlib import Path

from lyacomp import generate, load_model
from lyacomp.codegen import lower
from lyacomp.codegen.lower_higher import lower_higher
from lyacomp.derive import derive
from lyacomp.derive.higher import derive_higher

MODELS = sorted((Path(__file__).parent / "models").glob("m*.toml"))


def _timed(fn, *args):
    wall, cpu = time.perf_counter(), time.process_time()
    out = fn(*args)
    return out, time.perf_counter() - wall, time.process_time() - cpu


def _l1_part(symbolic):
    der = derive(symbolic)
    return der, lower(der)


def _l2_part(der):
    return lower_higher(derive_higher(der))


def main() -> None:
    for path in MODELS:
        symbolic = load_model(path).symbolic()
        (der, _), wall1, cpu1 = _timed(_l1_part, symbolic)
        high, wall2, cpu2 = _timed(_l2_part, der)
        source = generate(load_model(path)).embedded
        print(
            f"{path.stem}: l1 part {wall1:.2f} s wall / {cpu1:.2f} s CPU; l2 part "
            f"{wall2:.2f} s wall / {cpu2:.2f} s CPU (ratio {cpu2 / cpu1:.2f} in CPU); "
            f"entries d4 {high.n_fourth}, d5 {high.n_fifth}; C source {len(source) / 1024:.0f} KiB"
        )


if __name__ == "__main__":
    main()

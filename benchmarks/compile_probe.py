"""Times one ``lyacomp.compile`` in a fresh process (run by run.py as a subprocess).

Usage: python compile_probe.py MODEL.toml  (with LYACOMP_CACHE_DIR set by the caller).
Prints one JSON object: import, load and compile seconds.
"""

from __future__ import annotations

import json
import sys
import time


def main(path: str) -> None:
    start = time.perf_counter()
    import lyacomp

    imported = time.perf_counter()
    model = lyacomp.load_model(path)
    loaded = time.perf_counter()
    ev = lyacomp.compile(model)
    compiled = time.perf_counter()
    ok = ev().ok
    print(
        json.dumps(
            {
                "import_s": imported - start,
                "load_s": loaded - imported,
                "compile_s": compiled - loaded,
                "nominal_ok": ok,
            }
        )
    )


if __name__ == "__main__":
    main(sys.argv[1])

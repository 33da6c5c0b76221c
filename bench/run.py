"""Run every benchmark in bench/ (bench_*.py with a main()), one after another."""

from __future__ import annotations

import importlib.util
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent


def main(argv: list[str] | None = None) -> int:
    names = argv if argv else None
    failures = 0
    for path in sorted(HERE.glob("bench_*.py")):
        if names and path.stem not in names and path.stem.removeprefix("bench_") not in names:
            continue
        print(f"\n######## {path.stem} ########", flush=True)
        spec = importlib.util.spec_from_file_location(path.stem, path)
        mod = importlib.util.module_from_spec(spec)
        sys.path.insert(0, str(HERE.parent))
        t0 = time.perf_counter()
        try:
            spec.loader.exec_module(mod)
            rc = mod.main() if hasattr(mod, "main") else 0
        except Exception as exc:  # report and go on with the other benchmarks
            print(f"{path.stem} failed: {type(exc).__name__}: {exc}")
            rc = 1
        print(f"({path.stem}: {time.perf_counter() - t0:.1f} s)", flush=True)
        failures += bool(rc)
    return 1 if failures else 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))

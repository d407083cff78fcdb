"""`make bench`: run every `tests/benchmarks/bench_*.py` module's `run()` and print all figures as one JSON object.

Figures are medians and ratios measured side by side in one run; targets are checked here, never in unit tests.
`python -m tests.benchmarks NAME ...` runs only the named modules (e.g. `shaping`).
"""

from __future__ import annotations

import importlib
import json
import pkgutil
import sys

import tests.benchmarks as package


def main(selected: list[str]) -> int:
    figures: dict[str, object] = {}
    for info in sorted(pkgutil.iter_modules(package.__path__), key=lambda info: info.name):
        name = info.name.removeprefix("bench_")
        if not info.name.startswith("bench_") or (selected and name not in selected):
            continue
        print(f"bench: {name} ...", file=sys.stderr, flush=True)
        figures[name] = importlib.import_module(f"{package.__name__}.{info.name}").run()
    print(json.dumps(figures, indent=2))
    return 0


raise SystemExit(main(sys.argv[1:]))

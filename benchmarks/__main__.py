"""Run every ``benchmarks/bench_*.py`` module's ``run()`` and print its report.

Absolute times on shared 2-core machines are noise; each benchmark reports ratios against a
reference measured in the same run.
"""

import importlib
import pkgutil
import sys

import benchmarks


def main(argv=None) -> int:
    names = sorted(
        m.name for m in pkgutil.iter_modules(benchmarks.__path__) if m.name.startswith("bench_")
    )
    wanted = set(argv or sys.argv[1:])
    for name in names:
        if wanted and name not in wanted and name.removeprefix("bench_") not in wanted:
            continue
        module = importlib.import_module(f"benchmarks.{name}")
        print(f"== {name}: {module.__doc__.strip().splitlines()[0]}")
        for line in module.run():
            print(f"   {line}")
    return 0


if __name__ == "__main__":
    sys.exit(main())

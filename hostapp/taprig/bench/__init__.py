"""Benchmarks behind ``taprig bench`` / ``make bench``.

Every module in this package named ``bench_*.py`` is a suite: it exposes
``run(quick: bool) -> list[Record]``; ``taprig bench`` finds every such module and prints all their records in
one table (or ``--json``). Each record compares a measured figure with
a naive baseline measured *in the same run*, so the ratio means something on a
shared, noisy machine. Speed targets are checked here, never in timed tests.
"""

from __future__ import annotations

import importlib
import pkgutil
import time
from dataclasses import asdict, dataclass
from typing import Callable


@dataclass(frozen=True)
class Record:
    """One benchmark figure beside its baseline.

    ``ratio`` is value / baseline for rates (higher is better) as the suite
    states it; ``None`` where there is no baseline. ``target`` is the issue's
    target for ``value`` in the same unit, or ``None``; ``met`` says whether this
    run reached it (``None`` where there is no target or it is not checked).
    """

    name: str
    value: float
    unit: str
    baseline: float | None = None
    ratio: float | None = None
    target: str | None = None
    met: bool | None = None

    def as_dict(self) -> dict:
        return asdict(self)


def best_of(fn: Callable[[], object], repeats: int = 5) -> float:
    """Return the median wall time of ``repeats`` calls of ``fn`` [s]."""
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    times.sort()
    return times[len(times) // 2]


def suites() -> dict[str, object]:
    """Return the benchmark suite modules by short name (``bench_decode`` → ``decode``)."""
    found = {}
    for info in pkgutil.iter_modules(__path__):
        if info.name.startswith("bench_"):
            found[info.name[len("bench_"):]] = importlib.import_module(f"{__name__}.{info.name}")
    return dict(sorted(found.items()))

"""Cold-cache predictions for the stop-lamp ruleset (target: under 1 s), and a cached re-run.

Prints figures; asserts nothing. Run: python benchmarks/bench_predict.py
"""

from __future__ import annotations

import os
import statistics
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def main() -> None:
    started = time.perf_counter()
    from assistant.predict import predict
    from assistant.ruleset.load import load_ruleset

    imported = time.perf_counter() - started
    loaded = load_ruleset(ROOT / "rulesets" / "lamp" / "stop_lamps.yaml")
    with tempfile.TemporaryDirectory() as cache:
        os.environ["OHMTRAIL_CACHE"] = cache
        t0 = time.perf_counter()
        table = predict(loaded)  # cold cache, first call in this process
        first = time.perf_counter() - t0
        t0 = time.perf_counter()
        predict(loaded)  # from the disk cache
        cached = time.perf_counter() - t0
    runs = []
    for _ in range(5):
        t0 = time.perf_counter()
        predict(loaded, cache=False)
        runs.append(time.perf_counter() - t0)
    H, T, S = table.samples.shape
    print(f"stop_lamps: {H} hypotheses x {T} tests x {S} samples = {H * S} circuit variants per state")
    print(f"  import of the engine:               {imported * 1e3:8.1f} ms")
    print(f"  cold cache, first call:             {first * 1e3:8.1f} ms   (target < 1000 ms)")
    print(f"  cold cache, median of 5 more calls: {statistics.median(runs) * 1e3:8.1f} ms")
    print(f"  from the disk cache:                {cached * 1e3:8.1f} ms")


if __name__ == "__main__":
    main()

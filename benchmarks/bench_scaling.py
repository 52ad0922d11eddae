"""How the cost grows with circuit size: synthetic harnesses of 20, 100 and 400 nodes.

For each size: one batched solve of 1024 variants (the cost per operating point), and a whole
prediction table (every fault × every test) at a modest sample count. Prints figures; asserts
nothing. Run: python benchmarks/bench_scaling.py
"""

from __future__ import annotations

import statistics
import time

from harness import harness

SIZES = (20, 100, 400)
SAMPLES = {20: 64, 100: 32, 400: 8}


def main() -> None:
    from assistant.circuit.mna import solve
    from assistant.circuit.netlist import CircuitModel
    from assistant.meter import default_meter
    from assistant.predict import compute_table, hypotheses_of

    print(f"{'nodes':>6}{'parts':>7}{'faults':>8}{'solve/variant':>15}{'samples':>9}{'variants':>10}"
          f"{'table':>10}")
    for size in SIZES:
        loaded = harness(size)
        ruleset = loaded.ruleset
        model = CircuitModel(ruleset)
        _, members = hypotheses_of(ruleset)
        batch = model.batch(members[:64], 16)
        net = model.netlist(batch, model.states[0]).net
        runs = []
        for _ in range(3):
            t0 = time.perf_counter()
            solve(net)
            runs.append(time.perf_counter() - t0)
        per_variant = statistics.median(runs) / batch.size
        samples = SAMPLES[size]
        t0 = time.perf_counter()
        table = compute_table(loaded, default_meter(), samples=samples)
        whole = time.perf_counter() - t0
        H = len(table.hypotheses)
        print(f"{len(model.nodes):>6}{len(ruleset.components):>7}{H - 1:>8}{per_variant * 1e6:>13.1f}us"
              f"{samples:>9}{H * samples:>10}{whole:>9.2f}s")
    print("solve/variant: one batched solve of 1024 variants (64 hypotheses x 16 samples) / 1024;")
    print("table: compute_table for every fault and test (no cache), variants = hypotheses x samples.")


if __name__ == "__main__":
    main()

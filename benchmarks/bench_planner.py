"""How long choosing the next test takes: p95 on the stop lamps and on a 500 x 300 harness.

Targets (issue 4): under 100 ms on the stop-lamp ruleset, under 1 s on a synthetic harness of
500 hypotheses x 300 tests. Prints figures; asserts nothing.

    python benchmarks/bench_planner.py [--runs N]
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from assistant.beliefs import build_model  # noqa: E402
from assistant.diagnosis import Conclusion, Context, Diagnosis  # noqa: E402
from assistant.planner import Choice, PlannerSettings, choose_test, explain, stop_check  # noqa: E402
from assistant.predict import Hypothesis, PredictionTable, TestInfo, predict  # noqa: E402
from assistant.ruleset import load_ruleset  # noqa: E402
from assistant.simulate import draw_reading  # noqa: E402


def percentile(times: list[float], q: float) -> float:
    return float(np.percentile(np.array(times) * 1000.0, q))


def bench_stop_lamps(runs: int) -> None:
    loaded = load_ruleset(ROOT / "rulesets" / "lamp" / "stop_lamps.yaml")
    t0 = time.perf_counter()
    table = predict(loaded)
    t1 = time.perf_counter()
    start = Diagnosis.start(loaded, table, Context(), widen_to_pairs=False)
    t2 = time.perf_counter()
    rng = np.random.default_rng(0)
    times: list[float] = []
    for r in range(runs):
        h = r % len(table.hypotheses)
        world = int(rng.integers(table.samples.shape[2]))
        d = start
        while True:
            a = time.perf_counter()
            step = d.next()
            times.append(time.perf_counter() - a)
            if isinstance(step, Conclusion):
                break
            t = table.test_index(step.test_id)
            d = d.answer(step.test_id, draw_reading(table, h, t, rng, sample=world))
    print(f"stop_lamps: {len(table.hypotheses)} hypotheses x {len(table.tests)} tests; "
          f"predict {t1 - t0:.2f} s, evidence model {t2 - t1:.2f} s")
    print(f"  next test (with why): {len(times)} choices, median {percentile(times, 50):.1f} ms, "
          f"p95 {percentile(times, 95):.1f} ms (target < 100 ms)")


def harness_table(n_h: int, n_t: int, samples: int = 32, seed: int = 0, levels: int = 6) -> PredictionTable:
    """Voltage tests whose mean under each hypothesis is one of a few levels, with spread."""
    rng = np.random.default_rng(seed)
    priors = rng.dirichlet(np.ones(n_h))
    hyps = tuple(Hypothesis("none" if i == 0 else f"c{i}.open", () if i == 0 else (f"c{i}.open",),
                            float(priors[i]), "Repair", float(rng.uniform(5, 60))) for i in range(n_h))
    tests = tuple(TestInfo(f"t{j}", "voltage", "V", float(rng.uniform(1, 8)), None) for j in range(n_t))
    level = rng.integers(0, levels, size=(n_h, n_t)) * (12.0 / levels)
    x = np.round((level[:, :, None] + rng.normal(0, 0.05, size=(n_h, n_t, samples))) / 0.01) * 0.01
    sigma = (0.005 * np.abs(x) + 0.02) / np.sqrt(3.0)
    return PredictionTable("harness", "0" * 64, hyps, tests, x, sigma, np.full_like(x, 0.01), {})


def bench_harness(runs: int, n_h: int = 500, n_t: int = 300) -> None:
    table = harness_table(n_h, n_t)
    t0 = time.perf_counter()
    model = build_model(table)
    t1 = time.perf_counter()
    settings = PlannerSettings()
    rng = np.random.default_rng(1)
    times: list[float] = []
    for r in range(runs):
        p = rng.dirichlet(np.full(n_h, 0.3 if r % 2 else 3.0))  # sharp and flat beliefs
        taken = rng.choice(n_t, size=int(rng.integers(0, 20)), replace=False)
        candidates = [t for t in range(n_t) if t not in set(taken.tolist())]
        a = time.perf_counter()
        choice = choose_test(p, model, candidates, settings)
        stop_check(p, model, candidates, settings, choice.gain_bits if choice else None)
        if choice is not None:
            explain(p, model, Choice(choice.test_index, choice.gain_bits, choice.cost_minutes, choice.score))
        times.append(time.perf_counter() - a)
    print(f"harness: {n_h} hypotheses x {n_t} tests; evidence model {t1 - t0:.1f} s")
    print(f"  next test (gains, stop check, why): {runs} choices, median {percentile(times, 50):.0f} ms, "
          f"p95 {percentile(times, 95):.0f} ms (target < 1000 ms)")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=40, help="simulated diagnoses / harness choices")
    args = parser.parse_args()
    bench_stop_lamps(args.runs)
    bench_harness(max(10, args.runs // 2))


if __name__ == "__main__":
    main()

"""Long fuzz runs of every input ohmtrail reads; prints counts tried and failures found.

    python benchmarks/fuzz_inputs.py [TARGET ...]      (default: every target)
    FUZZ_EXAMPLES=N                                    inputs per target (default 3000)
    FUZZ_TIME_LIMIT=S                                  seconds allowed per input (default 20)

Each target feeds hypothesis-generated hostile inputs to the code under test and checks the
contract of tests/fuzzing.py: accepted soundly, or refused with the project's error (located,
one line); anything else is a failure, listed with an input that shows it. Exit status 1 when
any failure was found. A target whose code has not landed yet says so and is skipped.
The figures go to docs/reliability.md.
"""

from __future__ import annotations

import os
import resource
import sys
import tempfile
import warnings
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from tests import fuzz_targets as ft  # noqa: E402
from tests import fuzzing  # noqa: E402


def _targets(folder: Path) -> dict[str, tuple]:
    return {
        "ruleset": (fuzzing.mutated_ruleset(), lambda case: fuzzing.check_ruleset_bytes(case[1], folder, case[2]),
                    lambda case: case[0]),
        "reading": (ft.typed_reading(), ft.check_reading, lambda case: case[0].kind),
        "answers": (ft.mutated_answers(), lambda case: ft.check_answers(case[1], folder), lambda case: case[0]),
        "history": (ft.mutated_history(), lambda case: ft.check_history(case[1], folder), lambda case: case[0]),
        "export": (ft.tampered_export(), ft.check_export, lambda case: case[0]),
    }


def main(argv: list[str]) -> int:
    examples = int(os.environ.get("FUZZ_EXAMPLES", "3000"))
    time_limit = float(os.environ.get("FUZZ_TIME_LIMIT", "20"))
    # An input that makes the code eat memory must fail here, not take the shared machine down.
    limit = 6 * 1024**3
    resource.setrlimit(resource.RLIMIT_AS, (limit, limit))
    warnings.simplefilter("ignore")  # hypothesis notes on generated sizes are not findings
    failed = False
    with tempfile.TemporaryDirectory(prefix="ohmtrail-fuzz-") as tmp:
        targets = _targets(Path(tmp))
        chosen = argv or list(targets)
        print(f"{'target':<12} {'tried':>7} {'accepted':>9} {'refused':>8} {'failed':>7} {'distinct':>9} "
              f"{'slowest s':>10} {'total s':>8}")
        reports = []
        for name in chosen:
            if name not in targets:
                print(f"{name:<12} (not available yet)")
                continue
            strategy, check, kind_of = targets[name]
            r = fuzzing.run_budget(name, strategy, check, examples, kind_of, time_limit)
            reports.append(r)
            print(f"{name:<12} {r.tried:>7} {r.outcomes['accepted']:>9} {r.outcomes['refused']:>8} {r.failed:>7} "
                  f"{len(r.failures):>9} {r.slowest_seconds:>10.3f} {r.seconds:>8.1f}", flush=True)
        for r in reports:
            if r.kinds and any(r.kinds):
                print(f"\n{r.target}: inputs by kind: " + ", ".join(f"{k} {n}" for k, n in sorted(r.kinds.items())))
                print(f"{r.target}: slowest input kind: {r.slowest_kind} ({r.slowest_seconds:.3f} s)")
            for key, example in r.failures.items():
                failed = True
                print(f"FAILURE {r.target}: {key}\n    input: {example}")
    print("\nfailures found: " + ("yes" if failed else "none"))
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))

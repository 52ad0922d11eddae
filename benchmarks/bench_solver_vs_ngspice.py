"""The batched solver against ngspice on the same operating points, side by side.

Every hypothesis of every bundled ruleset in every state, at nominal values (the operating points
the ngspice comparison test checks). ngspice runs the exported decks in batch mode, once per
operating point (a process each, as a user would run a deck) and once with all of a state's
operating points in one deck (its own solver time without the process start). Prints the time
per operating point and the ratio (target: the engine at least 20x faster), and the engine's
time per point when each carries 64 tolerance samples, as predictions do. Asserts nothing.
"""

from __future__ import annotations

import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def _ngspice(deck: str, folder: Path) -> float:
    path = folder / "deck.cir"
    path.write_text(deck)
    t0 = time.perf_counter()
    subprocess.run(["ngspice", "-b", str(path)], capture_output=True, check=True)
    return time.perf_counter() - t0


def main() -> None:
    if shutil.which("ngspice") is None:
        print("ngspice is not installed (apt-get install ngspice): nothing to compare")
        sys.exit(1)
    from assistant.circuit.mna import solve
    from assistant.circuit.netlist import CircuitModel
    from assistant.circuit.operating import operate_states
    from assistant.predict import hypotheses_of
    from assistant.ruleset.load import load_ruleset, ruleset_files
    from assistant.spice import spice_deck

    print(f"{'ruleset':<17}{'state':<16}{'points':>7}{'engine/pt':>12}{'ngspice/pt':>12}{'ratio':>8}"
          f"{'1-deck/pt':>12}{'ratio':>8}{'engine x64':>12}{'ratio':>8}")
    for path in ruleset_files([ROOT / "rulesets"]):
        ruleset = load_ruleset(path).ruleset
        model = CircuitModel(ruleset)
        _, members = hypotheses_of(ruleset)
        batch = model.batch(members, 1, nominal=True)
        points = operate_states(model, batch, {})
        sampled = operate_states(model, model.batch(members, 64), {})
        ids = tuple(h for h, _ in members)
        for state, point in points.items():
            runs = []
            for _ in range(5):
                t0 = time.perf_counter()
                solve(point.built.net)
                runs.append(time.perf_counter() - t0)
            ours = statistics.median(runs) / len(ids)
            runs = []
            for _ in range(3):
                t0 = time.perf_counter()
                solve(sampled[state].built.net)
                runs.append(time.perf_counter() - t0)
            ours_mc = statistics.median(runs) / (64 * len(ids))
            with tempfile.TemporaryDirectory() as tmp:
                folder = Path(tmp)
                single = [_ngspice(spice_deck(ruleset, (h,), state).text, folder) for h in ids[: min(len(ids), 20)]]
                theirs = statistics.median(single)
                together = _ngspice(spice_deck(ruleset, ids, state).text, folder) / len(ids)
            print(f"{ruleset.id:<17}{state:<16}{len(ids):>7}{ours * 1e6:>10.1f}us{theirs * 1e6:>10.0f}us"
                  f"{theirs / ours:>7.0f}x{together * 1e6:>10.1f}us{together / ours:>7.1f}x"
                  f"{ours_mc * 1e6:>10.2f}us{together / ours_mc:>7.0f}x")
    print("engine/pt: one batched solve of all the state's operating points, divided by their number;")
    print("ngspice/pt: `ngspice -b` on one operating point's deck (median of up to 20);")
    print("1-deck/pt: `ngspice -b` on one deck holding all of them, divided by their number;")
    print("engine x64: the same operating points with 64 tolerance samples each, in one batched solve,")
    print("per point; its ratio is against 1-deck/pt (the Monte Carlo work the engine is built for).")


if __name__ == "__main__":
    main()

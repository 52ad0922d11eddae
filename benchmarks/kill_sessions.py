"""Kill scripted sessions with SIGKILL at random points and print what survived.

    python benchmarks/kill_sessions.py [KILLS] [SEED]      (default: 200 kills, seed 1)

The same harness as tests/test_kill.py (tests/kill_harness.py), run longer; it prints the
kills, the commits the runners reported, how many of them were lost, SQLite integrity check
failures, broken hash chains and short resumes (all should be 0), and the time taken.
"""

from __future__ import annotations

import sys
import tempfile
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from tests.kill_harness import run_kills  # noqa: E402


def main(argv: list[str]) -> int:
    kills = int(argv[0]) if argv else 200
    seed = int(argv[1]) if len(argv) > 1 else 1
    with tempfile.TemporaryDirectory(prefix="ohmtrail-kill-") as tmp:
        s = run_kills(Path(tmp), kills, seed=seed)
    print(f"kills                      {s.kills}")
    print(f"commits reported           {s.commits_reported}")
    print(f"sessions                   {s.sessions}")
    print(f"resumes                    {s.resumes}")
    print(f"kills inside a session     {s.killed_mid_session}")
    print(f"commits lost               {s.lost}")
    print(f"integrity check failures   {s.integrity_failures}")
    print(f"broken hash chains         {s.broken_chains}")
    print(f"resumes missing steps      {s.resume_short}")
    print(f"runner errors              {len(s.errors)}")
    for e in s.errors[:5]:
        print(f"    {e[:300]}")
    print(f"seconds                    {s.seconds:.1f}")
    bad = s.lost or s.integrity_failures or s.broken_chains or s.resume_short or s.errors
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))

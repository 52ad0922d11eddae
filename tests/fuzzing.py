"""Fuzzing inputs and their contracts, shared by the property tests and `make fuzz`.

Each target has a hypothesis strategy that makes hostile inputs and a ``check_*`` function
that feeds one input to the code under test and asserts the contract: the input is accepted
(and what comes out is sound) or refused with the project's error carrying its place; no other
exception, no message over several lines. ``check_*`` returns "accepted" or "refused".
The property tests run a modest number of examples; benchmarks/fuzz_*.py run many more and
count (docs/reliability.md has the figures).
"""

from __future__ import annotations

import math
import re
import signal
import time
import traceback
from collections import Counter
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from hypothesis import HealthCheck, Phase, given, settings
from hypothesis import strategies as st

from assistant.errors import LocatedError, Problem, RulesetError
from assistant.ruleset import fault_list, load_ruleset
from assistant.ruleset.lint import lint_ruleset

ROOT = Path(__file__).resolve().parent.parent
BUNDLED = tuple(sorted((ROOT / "rulesets").rglob("*.yaml")))
BUNDLED = tuple(p for p in BUNDLED if not p.name.endswith(".overlay.yaml"))
BUNDLED_TEXT = {p: p.read_text(encoding="utf-8") for p in BUNDLED}

# --------------------------------------------------------------------------- hostile pieces

# Values an author (or an attacker) could put where a value belongs.
HOSTILE_SCALARS = (
    ".inf", "-.inf", ".nan", "-1", "0", "0.0", "1e999", "1e-999", "9" * 5000, "''", "~", "[]", "{}",
    '"\\ud800"', '"\\x1b[31mred"', '"\\u202eevil"', '"\\0"', "yes", "no", "010", "0x1F", "0o17",
    "1_000", "12 V", "12 kV", "-12 V", "1e308 ohm", "1e308", "1e300 kV", "NaN V", "inf V", "12 lightyears",
    "'12 lightyears'", "*undefined", "&anchor value", "'" + "x" * 100_000 + "'", "2024-01-05",
    "2024-01-05T10:00:00Z", "null", "true", "-", "? x", "|\n  block text", ">-\n  folded",
    "\"unterminated", "'it''s'", "[1, 2, [3, [4]]]", "{a: {b: {c: 1}}}", "0.5 %", "150 %", "-5 %",
    "18 AWG", "0000 AWG", "99 AWG", "1/0 AWG", "5/0 AWG", "1.5 mm2", "1.5 mm3", "1.5", "3 min", "0 min",
    "-3 min", "1e9 min", "20 degC", "-300 degC", "500 K", "'<script>alert(1)</script>'",
    "\"'; DROP TABLE sessions; --\"", "'a\" [label=\"x\"]; b -> c'", "$(rm -rf /)", "`id`",
    "../../../etc/passwd", "{{ 7 * 7 }}", "12 V)", "12 (V", "12 V**", "12 __import__",
)

# Tags that would build objects or unusual kinds in a permissive loader.
HOSTILE_TAGS = (
    "!!python/object/apply:os.system ['true']",
    "!!python/object/new:builtins.eval ['1']",
    "!!python/name:builtins.eval",
    "!!python/object:builtins.object {}",
    "!!python/module:os",
    "!!python/tuple [1, 2]",
    "!!binary aGVsbG8=",
    "!!set {a, b}",
    "!!omap [a: 1]",
    "!!pairs [a: 1]",
    "!!timestamp 2024-01-05",
    "!!str 12 V",
    "!!int '12'",
    "!!float 'nan'",
    "!!null ''",
    "!!bool 'yes'",
    "!!map {a: 1}",
    "!!seq [a]",
    "!custom value",
    "!<tag:example.org,2024:x> value",
    "!!merge <<",
)

_KEY_VALUE = re.compile(r"^(\s*(?:-\s+)?[A-Za-z_][\w.+\-]*:)(\s+)(\S.*)$")


def _value_lines(lines: list[str]) -> list[int]:
    return [i for i, line in enumerate(lines) if _KEY_VALUE.match(line)]


# Core YAML tags a loader may take as plain data; any other tag must be refused as such.
SAFE_TAGS = ("!!str", "!!int", "!!float", "!!null", "!!bool", "!!map", "!!seq")

DIRECTIVES = (
    ("%YAML 1.1\n---\n", "YAML 1.2"),  # would switch to 1.1 rules: `no` false, `010` eight
    ("%YAML 1.2\n---\n", None),
    ("%YAML 2.0\n---\n", "YAML"),
    ("%TAG !! tag:example.org,2024:\n---\n", None),  # the file uses no !! tags of its own
    ("---\n", None),
    ("--- !!map\n", None),
)


@st.composite
def mutated_ruleset(draw: st.DrawFn) -> tuple[str, bytes, str | None]:
    """(mutation kind, bytes, expected refusal) of a bundled ruleset with one kind of damage.

    The third member, when set, is a fragment the refusal must contain: a hostile YAML tag
    must be refused as a tag, whatever else is wrong with the value it sits on.
    """
    return mutate_text(draw, BUNDLED_TEXT[draw(st.sampled_from(BUNDLED))])


def mutate_text(draw: st.DrawFn, text: str, extra_values: tuple[str, ...] = ()) -> tuple[str, bytes, str | None]:
    """One kind of damage done to a YAML text: (kind, bytes, expected refusal or None)."""
    expect: str | None = None
    lines = text.split("\n")
    kind = draw(st.sampled_from((
        "delete_lines", "swap_values", "hostile_value", "random_bytes", "deep_nesting", "yaml_tag",
        "duplicate_line", "indent", "truncate", "aliases", "random_text_value", "directive",
    )))
    values = _value_lines(lines)
    if kind == "delete_lines":
        for _ in range(draw(st.integers(1, 6))):
            if len(lines) > 1:
                del lines[draw(st.integers(0, len(lines) - 1))]
    elif kind == "swap_values":
        for _ in range(draw(st.integers(1, 3))):
            a, b = draw(st.sampled_from(values)), draw(st.sampled_from(values))
            ma, mb = _KEY_VALUE.match(lines[a]), _KEY_VALUE.match(lines[b])
            assert ma and mb
            lines[a] = ma.group(1) + ma.group(2) + mb.group(3)
            lines[b] = mb.group(1) + mb.group(2) + ma.group(3)
    elif kind in ("hostile_value", "yaml_tag", "deep_nesting", "random_text_value"):
        i = draw(st.sampled_from(values))
        m = _KEY_VALUE.match(lines[i])
        assert m
        if kind == "hostile_value":
            new = draw(st.sampled_from(HOSTILE_SCALARS + extra_values))
        elif kind == "yaml_tag":
            new = draw(st.sampled_from(HOSTILE_TAGS))
            if new.startswith("!!timestamp"):
                expect = "a date is not expected"
            elif not new.startswith(SAFE_TAGS):
                expect = "tag" if new.startswith(("!!python", "!custom", "!<", "!!merge")) else "(!!"
        elif kind == "random_text_value":
            new = draw(st.text(min_size=0, max_size=40))
        else:
            depth = draw(st.one_of(st.integers(1, 80), st.integers(80, 5000)))
            opener, closer = draw(st.sampled_from((("[", "]"), ("{a: ", "}"))))
            new = opener * depth + "1" + closer * draw(st.sampled_from((depth, 0, max(depth - 1, 0))))
        lines[i] = m.group(1) + " " + new.replace("\n", "\n" + " " * (len(m.group(1)) - len(m.group(1).lstrip()) + 2))
    elif kind == "directive":
        directive, expect = draw(st.sampled_from(DIRECTIVES))
        lines.insert(0, directive.rstrip("\n"))
    elif kind == "duplicate_line":
        i = draw(st.integers(0, len(lines) - 1))
        lines.insert(draw(st.integers(0, len(lines))), lines[i])
    elif kind == "indent":
        i = draw(st.integers(0, len(lines) - 1))
        shift = draw(st.sampled_from((-4, -2, -1, 1, 2, 4)))
        lines[i] = (" " * shift + lines[i]) if shift > 0 else lines[i][-shift:]
    elif kind == "aliases":
        # an anchor on one value, aliases to it elsewhere; sometimes an exponential expansion
        if draw(st.booleans()):
            bomb = ["lol0: &l0 [x, x, x, x, x, x, x, x, x, x]"]
            for n in range(1, draw(st.integers(2, 9))):
                bomb.append(f"lol{n}: &l{n} [" + ", ".join([f"*l{n - 1}"] * 10) + "]")
            lines[0:0] = bomb
        else:
            i, j = draw(st.sampled_from(values)), draw(st.sampled_from(values))
            mi, mj = _KEY_VALUE.match(lines[i]), _KEY_VALUE.match(lines[j])
            assert mi and mj
            lines[i] = mi.group(1) + " &a " + mi.group(3)
            lines[j] = mj.group(1) + " *a"
    joined = "\n".join(lines)
    data = joined.encode("utf-8", "surrogatepass")
    if kind == "random_bytes":
        buf = bytearray(data)
        for _ in range(draw(st.integers(1, 20))):
            pos = draw(st.integers(0, len(buf)))
            byte = draw(st.integers(0, 255))
            if draw(st.booleans()) and pos < len(buf):
                buf[pos] = byte
            else:
                buf.insert(pos, byte)
        data = bytes(buf)
    elif kind == "truncate":
        data = data[: draw(st.integers(0, len(data)))]
    return kind, data, expect


# --------------------------------------------------------------------------- contracts


def assert_one_line_located(err: Exception, file: str, error_type: type[LocatedError] = RulesetError) -> None:
    """A refusal the CLI can print as one line, pointing into the file."""
    text = str(err)
    assert text, "empty error message"
    assert "\n" not in text and "\r" not in text, f"message over several lines: {text!r}"
    assert len(text) < 2000, f"message of {len(text)} characters"
    assert isinstance(err, error_type)
    assert isinstance(err, LocatedError)
    for problem in err.problems:
        assert isinstance(problem, Problem)
        assert problem.file == file, f"problem without its file: {problem}"
        assert problem.line is not None and problem.line >= 1, f"problem without a line: {problem}"
        assert "\n" not in problem.message, f"problem over several lines: {problem.message!r}"


_CONTROL = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\x7f-\x9f]")


def _all_strings(value: Any) -> list[str]:
    if isinstance(value, str):
        return [value]
    if isinstance(value, dict):
        return [s for k, v in value.items() for s in _all_strings(k) + _all_strings(v)]
    if isinstance(value, (list, tuple)):
        return [s for v in value for s in _all_strings(v)]
    return []


def _all_floats(value: Any) -> list[float]:
    if isinstance(value, float):
        return [value]
    if isinstance(value, dict):
        return [f for v in value.values() for f in _all_floats(v)]
    if isinstance(value, (list, tuple)):
        return [f for v in value for f in _all_floats(v)]
    return []


def check_ruleset_file(path: Path, expect: str | None = None) -> str:
    """Load one ruleset file: it loads soundly or is refused with a located RulesetError.

    Soundly: every number finite, every text encodable as UTF-8 (the store, export and report
    need it) and free of control characters (they would reach the terminal), lint runs
    without raising, and a clean ruleset's priors form a distribution. ``expect``: the input
    must be refused with a message containing it.
    """
    try:
        loaded = load_ruleset(path)
    except RulesetError as err:
        assert_one_line_located(err, str(path))
        if expect is not None:
            assert expect in str(err), f"refused, but not for the reason expected ({expect!r}): {err}"
        return "refused"
    assert expect is None, f"loaded, but it should have been refused ({expect!r})"
    dumped = loaded.ruleset.model_dump()
    floats = _all_floats(dumped)
    assert all(math.isfinite(f) for f in floats), "a loaded ruleset holds a number that is not finite"
    for text in _all_strings(dumped):
        text.encode("utf-8")  # UnicodeEncodeError on a lone surrogate
        assert not _CONTROL.search(text), f"a loaded ruleset holds a control character: {text[:80]!r}"
    problems = lint_ruleset(loaded)  # must not raise, whatever passed the schema
    for problem in problems:
        assert problem.file == str(path) and problem.line is not None, f"lint problem not located: {problem}"
        assert "\n" not in str(problem)
    if not problems:
        # a clean ruleset has priors that form a distribution
        weights = [loaded.ruleset.none_weight] + [f.weight for f in fault_list(loaded.ruleset)]
        total = math.fsum(weights)
        assert math.isfinite(total) and total > 0, f"prior weights sum to {total}"
        priors = [w / total for w in weights]
        assert all(math.isfinite(p) and 0 <= p <= 1 for p in priors)
        assert math.isclose(math.fsum(priors), 1.0, rel_tol=1e-9)
    return "accepted" if not problems else "refused"


def check_ruleset_bytes(data: bytes, folder: Path, expect: str | None = None) -> str:
    """Write the bytes as a ruleset file in ``folder`` and check it."""
    path = folder / "fuzzed.yaml"
    path.write_bytes(data)
    return check_ruleset_file(path, expect)


# --------------------------------------------------------------------------- long runs


@dataclass
class FuzzReport:
    """What one long fuzz run tried and found."""

    target: str
    tried: int = 0
    outcomes: Counter[str] = field(default_factory=Counter)
    kinds: Counter[str] = field(default_factory=Counter)
    failures: dict[str, str] = field(default_factory=dict)  # distinct failure -> an input that shows it
    failed: int = 0
    slowest_seconds: float = 0.0
    slowest_kind: str = ""
    seconds: float = 0.0


class InputTimeout(Exception):
    """One input took longer than the run's time limit per input."""


def _alarm(_signum: int, _frame: Any) -> None:
    raise InputTimeout("input took longer than the time limit")


def run_budget(target: str, strategy: st.SearchStrategy[Any], check: Callable[[Any], str], examples: int,
               kind_of: Callable[[Any], str] = lambda _x: "", time_limit: float = 20.0) -> FuzzReport:
    """Feed ``examples`` generated inputs to ``check``; count outcomes and distinct failures.

    Unlike a property test it does not stop at the first failure: each distinct one (by
    exception type and the line that raised it) is kept with the first input that showed it.
    An input that runs past ``time_limit`` seconds is stopped and counted as a failure.
    """
    report = FuzzReport(target)
    previous = signal.signal(signal.SIGALRM, _alarm)

    @settings(max_examples=examples, deadline=None, database=None, phases=[Phase.generate],
              suppress_health_check=list(HealthCheck))
    @given(strategy)
    def run(value: Any) -> None:
        report.tried += 1
        kind = kind_of(value)
        report.kinds[kind] += 1
        start = time.perf_counter()
        signal.setitimer(signal.ITIMER_REAL, time_limit)
        try:
            report.outcomes[check(value)] += 1
        except Exception as exc:  # the point: anything but the contract is a finding
            report.failed += 1
            if isinstance(exc, InputTimeout):
                key = f"input took over {time_limit:g} s"
            else:
                tb = traceback.extract_tb(exc.__traceback__)[-1]
                first = str(exc).splitlines()[0] if str(exc) else ""
                # one failure, whatever file, number or character it names
                first = re.sub(r"\S*fuzzed\.yaml(:\d+)*", "FILE", first)
                first = re.sub(r"#x[0-9a-f]+|U\+[0-9A-F]+|\d+", "N", first)[:120]
                key = f"{type(exc).__name__} at {Path(tb.filename).name}:{tb.lineno}: {first}"
            report.failures.setdefault(key, f"[{kind}] {value!r}"[:300])
        finally:
            signal.setitimer(signal.ITIMER_REAL, 0)
            took = time.perf_counter() - start
            if took > report.slowest_seconds:
                report.slowest_seconds, report.slowest_kind = took, kind

    start = time.perf_counter()
    try:
        run()
    finally:
        signal.signal(signal.SIGALRM, previous)
    report.seconds = time.perf_counter() - start
    return report

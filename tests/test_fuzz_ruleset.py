"""Fuzzing the ruleset loader: damaged bundled rulesets load or give one located line.

The contract (tests/fuzzing.py): every input either loads (numbers finite, lint runs without
raising, a clean ruleset's priors form a distribution) or raises RulesetError whose problems
carry the file and a line, printed on one line. The table below keeps each finding of the
fuzz runs (docs/reliability.md) as a regression case. `make fuzz` runs the same with a large
example budget.
"""

from __future__ import annotations

from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from assistant.errors import RulesetError
from assistant.ruleset import load_ruleset
from assistant.ruleset.load import MAX_DEPTH, MAX_FILE_BYTES, MAX_VALUES
from tests.conftest import STOP_LAMPS
from tests.fuzzing import BUNDLED, assert_one_line_located, check_ruleset_bytes, mutated_ruleset

FUZZ = settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow,
                                                                        HealthCheck.data_too_large])


def test_every_bundled_ruleset_is_fuzzed() -> None:
    assert STOP_LAMPS in BUNDLED


@FUZZ
@given(case=mutated_ruleset())
def test_mutated_rulesets_load_or_are_refused_with_a_place(tmp_path_factory: pytest.TempPathFactory,
                                                           case: tuple[str, bytes, str | None]) -> None:
    _kind, data, expect = case
    assert check_ruleset_bytes(data, tmp_path_factory.mktemp("fuzz"), expect) in ("accepted", "refused")


@settings(max_examples=40, deadline=None)
@given(data=st.binary(max_size=400))
def test_arbitrary_bytes_are_refused_with_a_place(tmp_path_factory: pytest.TempPathFactory, data: bytes) -> None:
    # Random bytes are never a valid ruleset: all must be refused (none may crash).
    assert check_ruleset_bytes(data, tmp_path_factory.mktemp("bytes")) == "refused"




@pytest.mark.parametrize(
    ("yaml_text", "fragment"),
    [
        # Finding 1: a tag in the yaml.org namespace passed the tag check when it sat on a list:
        # `!!python/object/apply:os.system [...]` loaded as a plain list (nothing ran, but a
        # ruleset must not name object constructors at all).
        ("id: !!python/object/apply:os.system ['true']\n", "YAML tag '!!python/object/apply:os.system'"),
        ("id: !!python/object/new:builtins.eval {}\n", "YAML tag '!!python/object/new:builtins.eval'"),
        ("id: !!python/name:os.system\n", "YAML tag '!!python/name:os.system'"),
        ("id: !custom {a: 1}\n", "YAML tag '!custom'"),
        ("id: !!binary aGVsbG8=\n", "binary data (!!binary)"),
        ("id: !!set {a, b}\n", "a set (!!set)"),
        ("id: !!omap [a: 1]\n", "an ordered map (!!omap)"),
        ("id: !!pairs [a: 1]\n", "a list of pairs (!!pairs)"),
        # Finding 2: a %YAML 1.1 directive switched the parser to YAML 1.1 (`no` became false,
        # `010` became eight), against the promise that the loader reads YAML 1.2 only.
        ("%YAML 1.1\n---\nid: no\n", "only YAML 1.2 is read"),
        # Finding 3: .inf and .nan passed as weights and quantities (priors became NaN).
        ("none_weight: .inf\n", "is not a usable number"),
        ("none_weight: .nan\n", "is not a usable number"),
        # Finding 4: a lone surrogate or a control character in a text field loaded, to fail
        # later in the store or reach the terminal as an escape sequence.
        ('title: "\\ud800"\n', "lone surrogate"),
        ('title: "\\x1b[31mred"\n', "U+001B, a control character"),
        # Finding 5: aliases expanding exponentially took 12 s and ~10^7 values to refuse.
        ("a: &a [x, x, x, x, x, x, x, x, x, x]\nb: &b [*a, *a, *a, *a, *a, *a, *a, *a, *a, *a]\n"
         "c: &c [*b, *b, *b, *b, *b, *b, *b, *b, *b, *b]\nd: &d [*c, *c, *c, *c, *c, *c, *c, *c, *c, *c]\n"
         "e: &e [*d, *d, *d, *d, *d, *d, *d, *d, *d, *d]\nf: &f [*e, *e, *e, *e, *e, *e, *e, *e, *e, *e]\n",
         f"more than {MAX_VALUES} values"),
        # Finding 6: deep flow nesting made ruamel's scanner quadratic (seconds per file).
        ("a: " + "[" * 3000 + "]" * 3000 + "\n", f"at most {MAX_DEPTH} levels"),
        ("a: " + "[" * 100_000 + "\n", f"at most {MAX_DEPTH} levels"),
        # deep block nesting: ruamel's recursion runs out; a located refusal, no traceback
        ("".join(" " * i + f"k{i}:\n" for i in range(200)) + " " * 200 + "x\n", f"at most {MAX_DEPTH} levels"),
        # Finding 7: a number with thousands of digits gave Python's own hint about
        # sys.set_int_max_str_digits, at 1:1 instead of the number's place.
        ("format: 1\nsystem_voltage: " + "9" * 5000 + "\n", "a number with thousands of digits"),
        # Finding 8: ruamel's messages for a bad character came on two lines.
        ("a: \x07\n", "unacceptable character"),
        # Finding 9: pint's parser raised tokenize.TokenError on an unbalanced bracket in a
        # unit; it passed through pydantic as a crash, not a located error.
        ("format: 1\nsystem_voltage: 12 V)\n", "has a unit ohmtrail does not know"),
    ],
)
def test_fuzz_findings_are_refused_with_one_located_line(tmp_path: Path, yaml_text: str, fragment: str) -> None:
    path = tmp_path / "finding.yaml"
    path.write_bytes(yaml_text.encode("utf-8", "surrogatepass"))
    with pytest.raises(RulesetError) as info:
        load_ruleset(path)
    assert any(fragment in str(problem) for problem in info.value.problems), str(info.value)
    assert_one_line_located(info.value, str(path))


def test_finding_locations_point_at_the_value(tmp_path: Path) -> None:
    path = tmp_path / "tagged.yaml"
    path.write_text("format: 1\ntitle: x\nid: !!python/object/apply:os.system ['true']\n", encoding="utf-8")
    with pytest.raises(RulesetError) as info:
        load_ruleset(path)
    assert (info.value.line, info.value.column) == (3, 5)
    path.write_text("format: 1\nnone_weight: 12\nthreshold: .nan\n", encoding="utf-8")
    with pytest.raises(RulesetError) as info:
        load_ruleset(path)
    assert (info.value.line, info.value.column, info.value.field) == (3, 12, "threshold")


def test_a_ruleset_file_larger_than_the_limit_is_refused(tmp_path: Path) -> None:
    path = tmp_path / "big.yaml"
    path.write_bytes(b"# padding\n" * (MAX_FILE_BYTES // 10 + 1))
    with pytest.raises(RulesetError, match="reads files of at most") as info:
        load_ruleset(path)
    assert_one_line_located(info.value, str(path))


def test_str_tag_and_plain_aliases_still_load(tmp_path: Path) -> None:
    # The limits refuse no real ruleset: `!!str` gives text, and a plain anchor/alias pair works.
    text = STOP_LAMPS.read_text(encoding="utf-8")
    text = text.replace('version: "1.0.0"', "version: !!str 1.0.0", 1)
    text = text.replace("title: Stop lamps, 12 V, fed through the pedal switch", "title: &t Stop lamps", 1)
    text = text.replace("  - model: Larkspur CV-2 courier van   # our own invented vehicle",
                        "  - model: Larkspur CV-2 courier van\n    notes: *t", 1)
    path = tmp_path / "aliases.yaml"
    path.write_text(text, encoding="utf-8")
    rs = load_ruleset(path).ruleset
    assert rs.version == "1.0.0"
    assert rs.applies_to[0].notes == "Stop lamps"

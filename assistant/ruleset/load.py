"""Reading ruleset files: YAML 1.2 with positions, into frozen :class:`Ruleset` models.

Every way a file can be wrong ends in a :class:`RulesetError` whose problems carry the file,
line and column (1-based) and the field path: YAML syntax, duplicate keys (an error, never
"last one wins"), an empty, binary or oversized file, a value of the wrong type or dimension, a
YAML tag that would build an object. The parser is ruamel.yaml in YAML 1.2 mode, so ``no`` stays
the text "no" and ``010`` is ten, not eight; a ``%YAML 1.1`` directive cannot switch that off.

A ruleset is data: only YAML's core kinds (mappings, sequences, text, numbers, booleans, null)
pass; any other tag (``!!python/object...``, ``!!binary``, ``!!set``, ``!custom``) is refused
where it stands, and so are numbers that are not finite, text with control characters or lone
surrogates, nesting deeper than any ruleset needs, and aliases that expand past a fixed budget
(an "exponential entity" file). These limits were found by fuzzing (docs/reliability.md).
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import math
import re
from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, TypeVar

from pydantic import BaseModel, ValidationError
from pydantic_core import ErrorDetails
from ruamel.yaml import YAML
from ruamel.yaml.comments import CommentedMap, CommentedOrderedMap, CommentedSeq, TaggedScalar
from ruamel.yaml.error import MarkedYAMLError, YAMLError

from assistant.errors import Problem, RulesetError
from assistant.ruleset.model import Ruleset

RULESET_SUFFIXES = (".yaml", ".yml")

# Limits a real ruleset stays far below (the bundled ones: tens of KB, depth < 10, a few
# thousand values); past them a file is a mistake or an attack, refused with a message.
MAX_FILE_BYTES = 1024 * 1024
MAX_DEPTH = 64
MAX_VALUES = 200_000
# C0 and C1 control characters other than tab, newline and carriage return: they would reach
# the terminal, the drawing and the report as escape sequences. Lone surrogates cannot be
# encoded as UTF-8 at all (the store, the export and the report would fail on them later).
_BAD_CHARS = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\x7f-\x9f\ud800-\udfff]")
_YAML_DIRECTIVE = re.compile(r"^%YAML[ \t]+(\S+)", re.MULTILINE)
_LONG_NUMBER = re.compile(r"\d{4000,}")
_BRACKET = re.compile(r"[\[\]{}]")


@dataclass(frozen=True, eq=False)
class Locator:
    """Maps a field path (as pydantic reports it) to the line and column in the source."""

    file: str
    tree: Any

    def locate(self, path: Sequence[str | int], at_key: bool = False) -> tuple[int, int]:
        """1-based (line, column) of the deepest part of ``path`` present in the document.

        With ``at_key``, the last part is located at its key rather than its value.
        """
        node = self.tree
        line, col = _start(node)
        for i, part in enumerate(path):
            if isinstance(node, CommentedMap) and part in node:
                if at_key and i == len(path) - 1:
                    line, col = _pos(node.lc.key(part))
                elif _is_scalar(node[part]):
                    line, col = _pos(node.lc.value(part))
                else:
                    line, col = _start_of(node, part)
                node = node[part]
            elif isinstance(node, CommentedSeq) and isinstance(part, int) and 0 <= part < len(node):
                line, col = _pos(node.lc.item(part))
                node = node[part]
            # else: a discriminator tag or a missing key: stay at the parent
        return line, col

    def problem(self, message: str, path: Sequence[str | int], value: Any = None,
                at_key: bool = False) -> Problem:
        """A problem at ``path``, located."""
        line, col = self.locate(path, at_key)
        return Problem(message, self.file, line, col, self.field_name(path), value)

    def field_name(self, path: Sequence[str | int]) -> str:
        """The dotted field path as the author wrote it (pydantic's union tags left out)."""
        node = self.tree
        parts: list[str] = []
        for i, part in enumerate(path):
            if isinstance(node, CommentedMap) and part in node:
                node = node[part]
            elif isinstance(node, CommentedSeq) and isinstance(part, int) and 0 <= part < len(node):
                node = node[part]
            elif isinstance(node, CommentedMap) and i + 1 < len(path):
                continue  # a discriminator tag such as 'lamp' in components.3.lamp.rating
            parts.append(str(part))
        return ".".join(parts)


def _pos(pair: Any) -> tuple[int, int]:
    return int(pair[0]) + 1, int(pair[1]) + 1


def _start(node: Any) -> tuple[int, int]:
    lc = getattr(node, "lc", None)
    if lc is None or lc.line is None:
        return 1, 1
    return lc.line + 1, lc.col + 1


def _start_of(parent: CommentedMap, key: Any) -> tuple[int, int]:
    child = parent[key]
    if isinstance(child, (CommentedMap, CommentedSeq)) and len(child):
        return _start(child)
    return _pos(parent.lc.value(key))


def _is_scalar(value: Any) -> bool:
    return not isinstance(value, (CommentedMap, CommentedSeq))


@dataclass(frozen=True, eq=False)
class LoadedRuleset:
    """A validated ruleset with where it came from: path, SHA-256 of its bytes, positions.

    ``overlays`` names the priors overlays applied to ``ruleset`` (see ``assistant.overlay``),
    in the order applied, each as ``PATH sha256:HEX`` (what a session record keeps);
    ``overlay_sha256`` holds their SHA-256s alone. ``sha256`` stays that of the ruleset file.
    """

    ruleset: Ruleset
    path: str
    sha256: str
    locator: Locator = field(repr=False)
    overlays: tuple[str, ...] = ()
    overlay_sha256: tuple[str, ...] = ()

    @property
    def content_sha256(self) -> str:
        """SHA-256 of what was loaded: the ruleset file's, or with overlays, over it and theirs.

        Anything cached from the weights (prediction priors) must be keyed by this.
        """
        if not self.overlay_sha256:
            return self.sha256
        return hashlib.sha256(" ".join((self.sha256, *self.overlay_sha256)).encode()).hexdigest()


def _yaml() -> YAML:
    yaml = YAML(typ="rt")
    yaml.version = (1, 2)
    yaml.allow_duplicate_keys = False
    return yaml


def read_text(path: Path, error: type[RulesetError] = RulesetError) -> tuple[bytes, str]:
    """The bytes and UTF-8 text of a file, or a located error (missing, a folder, binary, empty)."""
    name = str(path)
    try:
        data = path.read_bytes()
    except FileNotFoundError as exc:
        raise error("no such file", file=name) from exc
    except IsADirectoryError as exc:
        raise error("is a folder, not a file", file=name) from exc
    except OSError as exc:
        raise error(f"cannot be read: {exc.strerror or exc}", file=name) from exc
    if len(data) > MAX_FILE_BYTES:
        raise error(f"is {len(data) // 1024} KB; ohmtrail reads files of at most {MAX_FILE_BYTES // 1024} KB here",
                    file=name, line=1, column=1)
    if b"\x00" in data:
        raise error("is a binary file, not YAML text", file=name, line=1, column=1)
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = data[: exc.start].count(b"\n") + 1
        col = exc.start - (data.rfind(b"\n", 0, exc.start) + 1) + 1
        raise error(f"is not UTF-8 text (byte 0x{data[exc.start]:02x})", file=name, line=line,
                    column=col) from exc
    if not text.strip():
        raise error("is empty", file=name, line=1, column=1)
    return data, text


def parse_yaml(text: str, name: str, error: type[RulesetError] = RulesetError) -> Any:
    """The ruamel round-trip tree of a YAML text, or a located error."""
    for match in _YAML_DIRECTIVE.finditer(text):
        if match.group(1) != "1.2":
            line, col = _offset_position(text, match.start(1))
            raise error(f"YAML: only YAML 1.2 is read (this file asks for %YAML {match.group(1)[:20]}); "
                        "remove the directive", file=name, line=line, column=col)
    deep = _too_deep_at(text)
    if deep is not None:
        line, col = _offset_position(text, deep)
        raise error(f"YAML: brackets nested deeper than a ruleset can be (at most {MAX_DEPTH} levels)",
                    file=name, line=line, column=col)
    try:
        tree = _yaml().load(text)
    except MarkedYAMLError as exc:
        mark = exc.problem_mark or exc.context_mark
        message = " ".join(p for p in (exc.context, exc.problem) if p) or "YAML syntax error"
        if "duplicate key" in message or type(exc).__name__ == "DuplicateKeyError":
            message = f"duplicate key: {_duplicate_key(exc)}"
        raise error(f"YAML: {_one_line(message)}", file=name, line=mark.line + 1 if mark else None,
                    column=mark.column + 1 if mark else None) from exc
    except YAMLError as exc:
        raise error(f"YAML: {_one_line(str(exc))}", file=name, line=1, column=1) from exc
    except RecursionError as exc:
        raise error(f"YAML: nested deeper than a ruleset can be (at most {MAX_DEPTH} levels)", file=name,
                    line=1, column=1) from exc
    except (ValueError, TypeError, OverflowError) as exc:  # ruamel's own faults on odd input
        long_number = _LONG_NUMBER.search(text)
        if long_number:
            line, col = _offset_position(text, long_number.start())
            raise error("a number with thousands of digits is not a value of a ruleset", file=name,
                        line=line, column=col) from exc
        raise error(f"YAML could not be read: {_one_line(str(exc))}", file=name, line=1, column=1) from exc
    return tree


def _too_deep_at(text: str) -> int | None:
    """Offset where ``[``/``{`` nesting first passes MAX_DEPTH, counted naively, else None.

    ruamel's scanner takes time quadratic in the flow nesting depth (seconds at a thousand
    levels), so such a file is refused before it is parsed. Brackets inside quotes count too:
    a real ruleset never comes near the limit either way.
    """
    depth = 0
    for match in _BRACKET.finditer(text):
        if match.group() in "[{":
            depth += 1
            if depth > MAX_DEPTH:
                return match.start()
        elif depth:
            depth -= 1
    return None


def _offset_position(text: str, offset: int) -> tuple[int, int]:
    line = text.count("\n", 0, offset) + 1
    return line, offset - (text.rfind("\n", 0, offset) + 1) + 1


def _one_line(message: str) -> str:
    """A parser message on one line, without ruamel's 'in "<unicode string>", position N'."""
    message = re.sub(r'\s*in "<unicode string>", (line \d+, column \d+|position \d+)', "", message)
    return " ".join(message.split())


def _duplicate_key(exc: MarkedYAMLError) -> str:
    problem = exc.problem or ""
    if "\"" in problem:
        return problem.split("\"")[1]
    return problem


def to_plain(node: Any, locator: Locator, path: tuple[str | int, ...] = ()) -> Any:
    """Plain dicts, lists and scalars from the ruamel tree; tags and odd types are errors.

    Only YAML's core kinds pass (see the module docstring); aliases are expanded, within
    :data:`MAX_VALUES` values in all.
    """
    return _Plain(locator).convert(node, path)


class _Plain:
    """One conversion of a tree, counting the values it produces (aliases expand)."""

    def __init__(self, locator: Locator) -> None:
        self.locator = locator
        self.values = 0

    def fail(self, message: str, path: tuple[str | int, ...], value: Any = None) -> RulesetError:
        return RulesetError.from_problems([self.locator.problem(message, path, value)])

    def convert(self, node: Any, path: tuple[str | int, ...]) -> Any:
        self.values += 1
        if self.values > MAX_VALUES:
            raise self.fail(f"the file expands to more than {MAX_VALUES} values (aliases repeated within "
                            "aliases?); a ruleset is far smaller", path)
        if len(path) > MAX_DEPTH:
            raise self.fail(f"nested deeper than a ruleset can be (at most {MAX_DEPTH} levels)", path)
        tag = getattr(getattr(node, "tag", None), "value", None)
        if isinstance(node, TaggedScalar) and tag == "tag:yaml.org,2002:str":
            return self.text(str(node.value), path)
        if tag is not None:
            shown = str(tag).replace("tag:yaml.org,2002:", "!!")[:80]
            raise self.fail(f"YAML tag '{shown}' is not allowed in a ruleset (a ruleset is data: "
                            "mappings, lists, text, numbers)", path)
        if isinstance(node, CommentedOrderedMap):
            raise self.fail("an ordered map (!!omap) is not allowed in a ruleset; write a plain mapping", path)
        if isinstance(node, CommentedMap):
            out: dict[str, Any] = {}
            for key, value in node.items():
                if not isinstance(key, str):
                    raise self.fail(f"key {_shown(key)} must be text (quote it)", path + (key,), key)
                self.text(key, path + (key,))
                out[key] = self.convert(value, path + (key,))
            return out
        if isinstance(node, CommentedSeq):
            return [self.convert(v, path + (i,)) for i, v in enumerate(node)]
        if node is None or isinstance(node, bool):
            return node
        if isinstance(node, int):
            return int(node)
        if isinstance(node, float):
            if not math.isfinite(node):
                raise self.fail(f"{node!r} is not a usable number here; give a finite value", path, float(node))
            return float(node)
        if isinstance(node, str):
            return self.text(str(node), path)
        if isinstance(node, (_dt.date, _dt.datetime)):
            raise self.fail("a date is not expected here; quote it if it is text", path, str(node))
        kinds = {"bytes": "binary data (!!binary)", "CommentedSet": "a set (!!set)",
                 "list": "a list of pairs (!!pairs)"}
        kind = kinds.get(type(node).__name__, f"a YAML value of kind {type(node).__name__}")
        raise self.fail(f"{kind} is not allowed in a ruleset", path)

    def text(self, value: str, path: tuple[str | int, ...]) -> str:
        bad = _BAD_CHARS.search(value)
        if bad:
            code = ord(bad.group())
            what = "a lone surrogate, not a character" if 0xD800 <= code <= 0xDFFF else "a control character"
            raise self.fail(f"text holds U+{code:04X}, {what}; remove it", path,
                            value[:80].encode("utf-8", "backslashreplace").decode("ascii", "backslashreplace"))
        return value


def _shown(key: Any) -> str:
    text = repr(key)
    return text if len(text) <= 60 else text[:57] + "..."


def validation_problems(exc: ValidationError, locator: Locator) -> list[Problem]:
    """Located problems from a pydantic validation error, one per error."""
    problems = []
    for err in exc.errors(include_url=False):
        loc = tuple(err["loc"])
        if err["type"] == "union_tag_invalid":
            # point at the `type:` or `kind:` value itself
            loc = loc + (str((err.get("ctx") or {}).get("discriminator", "")).strip("'\""),)
        message = _one_line_value(_message(err))
        name = locator.field_name(loc)
        problems.append(locator.problem(f"{name}: {message}" if name else message, loc, err.get("input"),
                                        at_key=err["type"] == "extra_forbidden"))
    return problems


def _one_line_value(message: str, limit: int = 300) -> str:
    """A message quoting the author's value kept to one line of reasonable length.

    The value may hold newlines (a block scalar) or be a megabyte long; both are shown
    escaped and elided, so that the CLI's one line stays one line.
    """
    message = message.replace("\r", "\\r").replace("\n", "\\n").replace("\t", "\\t")
    if len(message) > limit:
        message = message[: limit // 2] + " ... " + message[-(limit // 2 - 5):]
    return message


def _message(err: ErrorDetails) -> str:
    kind = err["type"]
    if kind == "missing":
        return "required field is missing"
    if kind == "extra_forbidden":
        return "unknown field"
    msg = str(err["msg"])
    if msg.startswith("Value error, "):
        msg = msg[len("Value error, "):]
    if kind == "union_tag_invalid":
        ctx = err.get("ctx") or {}
        kind = str(ctx.get("discriminator", "type")).strip("'\"")
        msg = f"unknown {kind} '{ctx.get('tag')!s}'; expected one of {ctx.get('expected_tags')}"
    return msg


def load_ruleset(path: str | Path, overlays: Sequence[str | Path] = (), *, beside: bool = True) -> LoadedRuleset:
    """Load and validate one ruleset file (schema only; ``lint`` adds the semantic checks).

    Priors overlays are applied in order: ``NAME.overlay.yaml`` beside the file first (unless
    ``beside`` is false), then each of ``overlays``.
    """
    loaded = _load_plain(path)
    from assistant import overlay as _overlay  # the overlay module builds on this one

    files = [Path(p) for p in overlays]
    auto = _overlay.beside_path(path)
    if beside and auto.is_file() and all(f.resolve() != auto.resolve() for f in files):
        files.insert(0, auto)
    if not files:
        return loaded
    found = [_overlay.load_overlay(f) for f in files]
    ruleset = _overlay.apply_overlays(loaded.ruleset, found, loaded.sha256)
    return LoadedRuleset(ruleset, loaded.path, loaded.sha256, loaded.locator,
                         tuple(o.label for o in found), tuple(o.sha256 for o in found))


M = TypeVar("M", bound=BaseModel)


def load_document(path: str | Path, model: type[M], not_a_mapping: str) -> tuple[M, str, Locator]:
    """A YAML file validated as ``model``: the model, the SHA-256 of the file's bytes, its positions.

    ``not_a_mapping`` is the message for a file whose top level is not a mapping.
    Every problem is a located :class:`RulesetError`.
    """
    name = str(path)
    data, text = read_text(Path(path))
    tree = parse_yaml(text, name)
    locator = Locator(name, tree)
    if not isinstance(tree, CommentedMap):
        raise RulesetError(not_a_mapping, file=name, line=1, column=1)
    plain = to_plain(tree, locator)
    try:
        document = model.model_validate(plain)
    except ValidationError as exc:
        raise RulesetError.from_problems(validation_problems(exc, locator)) from exc
    return document, hashlib.sha256(data).hexdigest(), locator


def _load_plain(path: str | Path) -> LoadedRuleset:
    ruleset, sha256, locator = load_document(
        path, Ruleset, "a ruleset is a YAML mapping (keys like 'id:' and 'components:')")
    return LoadedRuleset(ruleset, str(path), sha256, locator)


def ruleset_files(paths: Iterable[str | Path]) -> Iterator[Path]:
    """Every ruleset file named or found (recursively, *.yaml / *.yml) under the paths, sorted."""
    for given in paths:
        p = Path(given)
        if p.is_dir():
            yield from sorted(q for q in p.rglob("*") if q.suffix in RULESET_SUFFIXES and q.is_file()
                              and not q.name.endswith(".overlay.yaml"))
        else:
            yield p

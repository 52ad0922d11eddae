"""Starting rulesets for a new circuit: a commented template per family, with the author's id.

The templates live in ``assistant/data/templates/<family>.yaml``. Each is a complete ruleset
that lints clean and carries one case, so that ``ohmtrail new lamp x && ohmtrail lint x.yaml``
starts an author from something that works; its comments say what to change.
"""

from __future__ import annotations

import re
from importlib import resources
from pathlib import Path

from assistant.errors import OhmtrailError, OutputError

FAMILIES = ("lamp", "motor", "sensor_feed", "starter", "key_off_draw")
_NAME = re.compile(r"^[A-Za-z][A-Za-z0-9_\-]{0,63}$")
# The template's own top-level id line (a plain substitution keeps every comment and indent).
_TOP_ID = re.compile(r"^id: [A-Za-z][A-Za-z0-9_\-]*([ \t]*(?:#.*)?)$", re.MULTILINE)


def template_text(family: str) -> str:
    """The template ruleset of a family, as shipped."""
    if family not in FAMILIES:
        raise OhmtrailError(f"unknown family '{family}'; choose one of: {', '.join(FAMILIES)}")
    return (resources.files("assistant") / "data" / "templates" / f"{family}.yaml").read_text(encoding="utf-8")


def scaffold_text(family: str, name: str) -> str:
    """The template of ``family`` with its top-level ``id`` set to ``name``, all else as shipped."""
    if not _NAME.match(name):
        raise OhmtrailError(f"'{name}' cannot be a ruleset id: use letters, digits, '_' and '-', "
                            "starting with a letter")
    text, count = _TOP_ID.subn(lambda m: f"id: {name}{m.group(1)}", template_text(family), count=1)
    if count != 1:  # pragma: no cover - every shipped template has a top-level id line
        raise OhmtrailError(f"the {family} template has no top-level 'id:' line")
    return text


def write_scaffold(family: str, name: str, path: str | Path | None = None) -> Path:
    """Write the starting ruleset to ``path`` (default ``NAME.yaml``); never over an existing file."""
    text = scaffold_text(family, name)
    target = Path(path) if path is not None else Path(f"{name}.yaml")
    try:
        with target.open("x", encoding="utf-8") as fh:
            fh.write(text)
    except FileExistsError as exc:
        raise OutputError(f"{target}: already exists; not overwritten (choose another name or -o FILE)") from exc
    except OSError as exc:
        raise OutputError(f"{target}: cannot write: {exc.strerror or exc}") from exc
    return target

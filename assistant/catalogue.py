"""The rulesets a technician can pick from: the bundled ones and the shop's own, by circuit family.

Looked for, in order: every folder in ``$OHMTRAIL_RULESETS`` (separated by the system's path
separator), ``rulesets`` in the user's configuration folder (platformdirs
``user_config_dir("ohmtrail")``), and the ``rulesets`` folder shipped beside the package. A
file that does not load is left out of the list with a warning in the log.
"""

from __future__ import annotations

import logging
import os
from dataclasses import dataclass
from pathlib import Path

import platformdirs

from assistant.errors import RulesetError
from assistant.ruleset.load import load_ruleset, ruleset_files

log = logging.getLogger("ohmtrail.catalogue")


@dataclass(frozen=True)
class Entry:
    """One ruleset on offer."""

    family: str
    id: str
    title: str
    version: str
    path: str
    origin: str  # "bundled" or "configured"


def ruleset_folders() -> list[tuple[Path, str]]:
    """The folders searched, with where each comes from, in order."""
    folders: list[tuple[Path, str]] = []
    for part in os.environ.get("OHMTRAIL_RULESETS", "").split(os.pathsep):
        if part.strip():
            folders.append((Path(part.strip()).expanduser(), "configured"))
    folders.append((Path(platformdirs.user_config_dir("ohmtrail")) / "rulesets", "configured"))
    folders.append((Path(__file__).resolve().parent.parent / "rulesets", "bundled"))
    return folders


def catalogue() -> list[Entry]:
    """Every ruleset found, sorted by family then id; the first of two with one id wins."""
    seen: set[str] = set()
    entries: list[Entry] = []
    for folder, origin in ruleset_folders():
        if not folder.is_dir():
            continue
        for path in ruleset_files([folder]):
            try:
                ruleset = load_ruleset(path).ruleset
            except RulesetError as exc:
                log.warning("%s: left out of the list (%s)", path, exc)
                continue
            if ruleset.id in seen:
                continue
            seen.add(ruleset.id)
            entries.append(Entry(ruleset.family, ruleset.id, ruleset.title, ruleset.version, str(path), origin))
    return sorted(entries, key=lambda e: (e.family, e.id))

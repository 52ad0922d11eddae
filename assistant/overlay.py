"""Priors overlays: a small YAML file that replaces some fault weights of a ruleset at load time.

A fleet tunes the likelihoods of a ruleset from its repair history without editing the
ruleset itself: ``ohmtrail learn`` writes an overlay, and every command that loads the
ruleset applies it. An overlay looks like this::

    overlay: 1                      # overlay format version
    ruleset: stop_lamps             # the id of the ruleset it applies to
    ruleset_sha256: 3f1c...         # optional: the ruleset bytes it was learned against
    note: learned from fleet-repairs.csv, 30 repairs
    none_weight: 0.2                # optional: new prior weight of "no fault in this circuit"
    weights:                        # fault id -> new prior weight (0 switches a mode off)
      lamp_left.filament_open: 12.5
      g_rear.high_resistance: 1.9

Overlays stack: they are applied in order, a later one overriding an earlier one for the
same fault. Beside a ruleset ``NAME.yaml`` the file ``NAME.overlay.yaml`` is applied
automatically (first); ``--overlay FILE`` adds more. Applying returns a new frozen
:class:`Ruleset`; nothing is written back to the ruleset file.
"""

from __future__ import annotations

import dataclasses
import logging
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Annotated, Any, Literal

from pydantic import Field

from assistant.errors import RulesetError
from assistant.predict import Hypothesis, PredictionTable
from assistant.ruleset.defaults import fault_list
from assistant.ruleset.lint import allowed_modes
from assistant.ruleset.load import Locator, load_document
from assistant.ruleset.model import FaultId, FaultSpec, Frozen, Identifier, Ruleset

log = logging.getLogger("ohmtrail.overlay")

OVERLAY_VERSION = 1
OVERLAY_SUFFIX = ".overlay.yaml"

Weight = Annotated[float, Field(ge=0, allow_inf_nan=False)]


class Overlay(Frozen):
    """New prior weights for some faults of one ruleset."""

    overlay: Literal[1] = Field(description="overlay format version")
    ruleset: Identifier = Field(description="id of the ruleset it applies to")
    ruleset_sha256: str | None = Field(
        default=None, pattern=r"^[0-9a-f]{64}$", description="SHA-256 of the ruleset file it was made for"
    )
    note: str | None = None
    none_weight: Weight | None = None
    weights: dict[FaultId, Weight] = Field(default_factory=dict, description="fault id -> new prior weight")


@dataclass(frozen=True)
class LoadedOverlay:
    """A validated overlay with where it came from."""

    overlay: Overlay
    path: str
    sha256: str
    locator: Locator

    @property
    def label(self) -> str:
        """How a record names it: the path and the SHA-256 of its bytes."""
        return f"{self.path} sha256:{self.sha256}"


def beside_path(ruleset_path: str | Path) -> Path:
    """The overlay file applied automatically to a ruleset: ``NAME.overlay.yaml`` beside ``NAME.yaml``."""
    p = Path(ruleset_path)
    return p.with_name(p.stem + OVERLAY_SUFFIX)


def load_overlay(path: str | Path) -> LoadedOverlay:
    """Read and validate an overlay file; every problem is a located :class:`RulesetError`."""
    overlay, sha256, locator = load_document(
        path, Overlay, "an overlay is a YAML mapping (keys 'overlay:', 'ruleset:', 'weights:')")
    return LoadedOverlay(overlay, str(path), sha256, locator)


def apply_overlay(ruleset: Ruleset, loaded: LoadedOverlay, ruleset_sha256: str | None = None) -> Ruleset:
    """A new ruleset with the overlay's weights in place of the ruleset's own.

    Raises a located :class:`RulesetError` if the overlay is for another ruleset or names a
    component the ruleset lacks or a mode its type cannot have.
    """
    ov = loaded.overlay
    if ov.ruleset != ruleset.id:
        raise RulesetError.from_problems([loaded.locator.problem(
            f"overlay is for ruleset '{ov.ruleset}', not '{ruleset.id}'", ("ruleset",), ov.ruleset)])
    if ov.ruleset_sha256 and ruleset_sha256 and ov.ruleset_sha256 != ruleset_sha256:
        log.warning("%s: made for another version of ruleset '%s' (its sha256 differs); applied anyway",
                    loaded.path, ruleset.id)
    components = {c.id: c for c in ruleset.components}
    by_component: dict[str, dict[str, float]] = {}
    problems = []
    for fault_id, weight in ov.weights.items():
        if fault_id == "none":
            problems.append(loaded.locator.problem("give the weight of 'none' as none_weight:",
                                                   ("weights", fault_id), fault_id))
            continue
        comp_id, mode = fault_id.split(".", 1)
        comp = components.get(comp_id)
        if comp is None:
            problems.append(loaded.locator.problem(
                f"unknown component '{comp_id}' in ruleset '{ruleset.id}'", ("weights", fault_id), fault_id))
        elif mode not in allowed_modes(comp.type):
            problems.append(loaded.locator.problem(
                f"a {comp.type} cannot have fault mode '{mode}'", ("weights", fault_id), fault_id))
        else:
            by_component.setdefault(comp_id, {})[mode] = weight
    if problems:
        raise RulesetError.from_problems(problems)
    new_components = []
    for comp in ruleset.components:
        changes = by_component.get(comp.id)
        if not changes:
            new_components.append(comp)
            continue
        faults: dict[Any, FaultSpec] = dict(comp.faults)
        for mode, weight in changes.items():
            old = faults.get(mode)
            faults[mode] = old.model_copy(update={"weight": weight}) if old else FaultSpec(weight=weight)
        new_components.append(comp.model_copy(update={"faults": faults}))
    update: dict[str, Any] = {"components": tuple(new_components)}
    if ov.none_weight is not None:
        update["none_weight"] = ov.none_weight
    return ruleset.model_copy(update=update)


def apply_overlays(ruleset: Ruleset, overlays: Sequence[LoadedOverlay],
                   ruleset_sha256: str | None = None) -> Ruleset:
    """The ruleset with each overlay applied in turn (a later one wins for the same fault)."""
    for loaded in overlays:
        ruleset = apply_overlay(ruleset, loaded, ruleset_sha256)
    return ruleset


def apply_priors(table: PredictionTable, ruleset: Ruleset) -> PredictionTable:
    """The table with its hypothesis priors recomputed from the (overlaid) ruleset's weights.

    The samples do not depend on the weights, so a table predicted (or cached) for the ruleset
    without its overlays is made right for it here: "none" and each fault get weight / total,
    a pair "a+b" the product of its two priors, and a fault switched off gets 0.
    """
    weights = {f.id: f.weight for f in fault_list(ruleset)}
    total = ruleset.none_weight + sum(weights.values())
    if total <= 0:
        raise RulesetError(f"ruleset '{ruleset.id}' has no positive prior weight left")
    single = {"none": ruleset.none_weight / total, **{k: w / total for k, w in weights.items()}}

    def prior(h: Hypothesis) -> float:
        if not h.faults:
            return single["none"]
        value = 1.0
        for fault in h.faults:
            value *= single.get(fault, 0.0)
        return value

    hypotheses = tuple(dataclasses.replace(h, prior=prior(h)) for h in table.hypotheses)
    return dataclasses.replace(table, hypotheses=hypotheses)


def overlay_document(ruleset: Ruleset, weights: Mapping[str, float], *, ruleset_sha256: str | None = None,
                     note: str | None = None, none_weight: float | None = None) -> str:
    """The YAML text of an overlay (what ``ohmtrail learn`` writes), weights in ruleset order."""
    lines = [
        f"# Priors overlay for ruleset '{ruleset.id}' ({ruleset.title}).",
        "# Applied at load time over the ruleset's own weights; the ruleset file is unchanged.",
        f"overlay: {OVERLAY_VERSION}",
        f"ruleset: {ruleset.id}",
    ]
    if ruleset_sha256:
        lines.append(f"ruleset_sha256: {ruleset_sha256}")
    if note:
        lines.append(f"note: {_quoted(note)}")
    if none_weight is not None:
        lines.append(f"none_weight: {_number(none_weight)}")
    lines.append("weights:" if weights else "weights: {}")
    for fault_id, weight in weights.items():
        lines.append(f"  {fault_id}: {_number(weight)}")
    return "\n".join(lines) + "\n"


def _number(value: float) -> str:
    return f"{value:.6g}"


def _quoted(text: str) -> str:
    return '"' + text.replace("\\", "\\\\").replace('"', '\\"') + '"'

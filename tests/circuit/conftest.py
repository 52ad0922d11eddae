"""Small circuits written as ruleset dictionaries, and their nominal operating points."""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import Any

import pytest

from assistant.circuit.netlist import CircuitModel
from assistant.circuit.operating import operate_states
from assistant.predict import hypotheses_of
from assistant.ruleset.load import LoadedRuleset, Locator
from assistant.ruleset.model import Ruleset

RulesetFactory = Callable[..., Ruleset]


def build_ruleset(components: Sequence[dict[str, Any]], tests: Sequence[dict[str, Any]] | None = None,
                  states: dict[str, Any] | None = None, **extra: Any) -> Ruleset:
    nodes: list[str] = ["GND"]
    for comp in components:
        nodes += [n for n in comp["nodes"] if n not in nodes]
    doc = {
        "format": 1, "id": "bench", "title": "bench circuit", "family": "lamp", "version": "1",
        "system_voltage": "12 V", "nodes": {n: {} for n in nodes}, "components": list(components),
        "states": states or {"on": {"label": "on"}},
        "tests": list(tests or [{"id": "v_any", "kind": "voltage", "at": nodes[1]}]),
    }
    doc.update(extra)
    return Ruleset.model_validate(doc)


def loaded_of(ruleset: Ruleset) -> LoadedRuleset:
    return LoadedRuleset(ruleset, "<bench>", "0" * 64, Locator("<bench>", None))


def nominal_volts(ruleset: Ruleset, hypothesis: str = "none", state: str | None = None) -> dict[str, float]:
    """Node voltages of one hypothesis at nominal values, relays, fuses and motors settled."""
    model = CircuitModel(ruleset)
    pairs = [tuple(hypothesis.split("+"))] if "+" in hypothesis else []
    _, members = hypotheses_of(ruleset, pairs)  # type: ignore[arg-type]
    chosen = [m for m in members if m[0] == hypothesis]
    assert chosen, f"no hypothesis {hypothesis}"
    batch = model.batch(chosen, 1, nominal=True)
    point = operate_states(model, batch, {})[model.state(state)]
    return dict(zip(point.built.net.nodes, point.solution.volts[0], strict=True))


@pytest.fixture
def bench() -> RulesetFactory:
    return build_ruleset

"""The bundled rulesets: every one lints clean, the five families are covered, each carries its
own regression cases and they pass, and docs/rulesets.md lists them as they are."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest

from assistant.cautions import HIGH_VOLTAGE, MAKER_FIRST, cautions_for

from assistant.cases import run_cases
from assistant.predict import PredictionTable, predict
from assistant.ruleset import fault_list, lint_ruleset, load_ruleset, ruleset_files

ROOT = Path(__file__).resolve().parents[2]
RULESETS = ROOT / "rulesets"
DOC = ROOT / "docs" / "rulesets.md"
FILES = sorted(ruleset_files([RULESETS]))
FAMILIES = {"lamp", "motor", "sensor_feed", "starter", "key_off_draw"}  # issue 7's five families


def _id(path: Path) -> str:
    return str(path.relative_to(RULESETS))


def test_six_rulesets_across_the_five_families() -> None:
    assert len(FILES) >= 6
    families = {load_ruleset(p).ruleset.family for p in FILES}
    assert FAMILIES <= families, f"missing families: {sorted(FAMILIES - families)}"
    # each lives in the folder of its family
    for path in FILES:
        assert path.parent.name == load_ruleset(path).ruleset.family, _id(path)


@pytest.mark.parametrize("path", FILES, ids=_id)
def test_lints_clean(path: Path) -> None:
    assert [str(p) for p in lint_ruleset(load_ruleset(path))] == []


@pytest.mark.parametrize("path", FILES, ids=_id)
def test_drawn_for_our_invented_van_with_cautions_and_six_cases(path: Path) -> None:
    ruleset = load_ruleset(path).ruleset
    assert any("Larkspur" in v.model for v in ruleset.applies_to)
    assert ruleset.cautions, "every bundled ruleset carries its cautions"
    # the maker-first and high-voltage cautions come with every page from assistant.cautions, so a
    # ruleset does not repeat them in other words
    for test in ruleset.tests:
        shown = cautions_for(ruleset, test)
        assert MAKER_FIRST in shown and HIGH_VOLTAGE in shown
        assert sum("maker's procedures" in c for c in shown) == 1, test.id
    assert len(ruleset.cases) >= 6
    # a case for at least six different faults: the cases are not one fault six times
    assert len({c.expect for c in ruleset.cases}) >= 6


@pytest.mark.parametrize("path", FILES, ids=_id)
def test_every_parameter_line_names_its_source(path: Path) -> None:
    """Numeric electrical parameters carry a comment naming where they come from."""
    keys = ("emf", "internal_resistance", "rating", "resistance", "running_current", "pull_in",
            "voltage", "current", "awake_current", "ratio", "supply_resistance")
    pattern = re.compile(rf"^\s*({'|'.join(keys)}):\s*[-0-9.]")
    tags = ("FACTS.md", "common practice", "from memory", "demo data", "ECE R", "IACS", "Regulation")
    missing = [f"{_id(path)}:{n}: {line.strip()}"
               for n, line in enumerate(path.read_text(encoding="utf-8").splitlines(), 1)
               if pattern.match(line) and not any(t in line for t in tags)]
    assert missing == []


def test_high_current_tests_ask_for_a_clamp() -> None:
    """Above the meter's fused 10 A jack a current test must use a clamp (common practice)."""
    blower = load_ruleset(RULESETS / "motor" / "blower.yaml").ruleset
    starter = load_ruleset(RULESETS / "starter" / "starter.yaml").ruleset
    assert {t.id: t.jack for t in blower.tests if t.kind == "current"}["i_motor_high"] == "clamp"
    assert {t.id: t.jack for t in starter.tests if t.kind == "current"}["i_crank"] == "clamp"


def test_key_off_draw_waits_and_keeps_the_doors_shut() -> None:
    ruleset = load_ruleset(RULESETS / "key_off_draw" / "key_off_draw.yaml").ruleset
    total = next(t for t in ruleset.tests if t.id == "i_total")
    text = f"{total.instructions} {ruleset.states['asleep'].instructions}".lower()
    assert "wait" in text and "do not open the doors" in text
    assert "jumper" in text  # the meter goes in without breaking the circuit
    kinds = {t.kind for t in ruleset.tests}
    assert "fuse_drop" in kinds
    assert any(t.kind == "current" and t.isolate for t in ruleset.tests)


@pytest.mark.slow
@pytest.mark.parametrize("path", FILES, ids=_id)
def test_cases_pass_against_the_circuit_engine(path: Path, tmp_path: Path,
                                               monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("OHMTRAIL_CACHE", str(tmp_path / "cache"))
    loaded = load_ruleset(path)
    results = run_cases(loaded, predict(loaded, cache=False))
    failures = [f"{r.case_id}: {'; '.join(r.differences)}" for r in results if not r.passed]
    assert len(results) >= 6
    assert failures == []


def test_docs_table_matches_the_rulesets() -> None:
    """docs/rulesets.md lists every bundled ruleset with its real fault, test and case counts."""
    rows = {}
    for line in DOC.read_text(encoding="utf-8").splitlines():
        m = re.match(r"^\| `([^`]+\.yaml)` \| (\w+) \| [^|]+ \| (\d+) \| (\d+) \| (\d+) \|$", line)
        if m:
            rows[m.group(1)] = (m.group(2), int(m.group(3)), int(m.group(4)), int(m.group(5)))
    actual = {}
    for path in FILES:
        rs = load_ruleset(path).ruleset
        actual[_id(path)] = (rs.family, len(fault_list(rs)), len(rs.tests), len(rs.cases))
    assert rows == actual


@pytest.mark.slow
def test_headlamp_looks_for_lamps_lit_agree_with_the_circuit(tmp_path: Path,
                                                             monkeypatch: pytest.MonkeyPatch) -> None:
    """The looks for headlamps lit that should be dark follow the lamps' currents (``seen``);
    the relay voltages say on their own which faults light them: a relay output live with the
    lights off (the dip stalk resting at low beam), or the other beam's relay coil fed. Both
    must name the same faults (a welded relay contact lights its beam in every switch position;
    a light switch stuck on lights the low beams with the lights off, and is not seen once they
    are on). The one addition the lamp currents make is a bad shared ground of an H4 headlamp:
    on high beam the high filament's current finds its way back through the low filament, the
    low feeds and the other lamp's low filament, and the low beams glow (on low beam, the other
    way round): backfeed through a shared ground, common practice. No other fault may light them."""
    monkeypatch.setenv("OHMTRAIL_CACHE", str(tmp_path / "cache"))
    loaded = load_ruleset(RULESETS / "lamp" / "headlamps.yaml")
    table = predict(loaded, cache=False)
    half = loaded.ruleset.system_voltage / 2

    def live(test_id: str) -> set[str]:
        t = table.test_index(test_id)
        return {h.id for i, h in enumerate(table.hypotheses) if np.nanmedian(table.samples[i, t]) > half}

    low_when_off, high_when_off = live("v_k3_87_off"), live("v_k4_87_off")
    assert low_when_off and high_when_off  # there are faults to compare
    assert _answered(table, "look_lamps_off", "low_lit") == low_when_off
    assert _answered(table, "look_lamps_off", "high_lit") == high_when_off
    # a relay's output live with its coil dead: its contact is welded
    k3_welded = low_when_off - live("v_k3_86_off")
    k4_welded = high_when_off - live("v_k4_86_off")
    assert k3_welded and k4_welded
    grounds = {f"{c}.{m}" for c in ("w_gnd_left", "g_left", "w_gnd_right", "g_right")
               for m in ("open", "high_resistance")}
    for look, answer, by_relay in (("look_low_on_high", "stay_lit", live("coil_k3_on_high") | k3_welded),
                                   ("look_high_on_low", "lit", live("coil_k4_on_low") | k4_welded)):
        lit = _answered(table, look, answer)
        assert by_relay <= lit, look
        assert lit - by_relay and lit - by_relay <= grounds, look  # backfed through a bad ground


@pytest.mark.slow
def test_blower_speed_try_agrees_with_the_circuit(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """The "try every speed" answers are hand-written; the circuit model says on its own which
    speeds carry motor current under each fault: speed 4 and speed 1 by their currents, speeds 3
    and 2 by the pack tap of their path sitting between ground and battery voltage (current
    through it). The answer each fault most likely gets must name the same speeds. A seized
    motor carries stall current on every speed and turns nothing: no air, however the current."""
    monkeypatch.setenv("OHMTRAIL_CACHE", str(tmp_path / "cache"))
    loaded = load_ruleset(RULESETS / "motor" / "blower.yaml")
    table = predict(loaded, cache=False)
    volts = loaded.ruleset.system_voltage
    answers = {"all": {1, 2, 3, 4}, "four_no_faster": {1, 2, 3, 4}, "none": set(), "only_4": {4},
               "only_3_4": {3, 4}, "all_but_1": {2, 3, 4}, "all_but_2": {1, 3, 4},
               "all_but_3": {1, 2, 4}, "all_but_4": {1, 2, 3}}
    t = table.test_index("try_speeds")
    assert set(table.tests[t].outcomes) == set(answers)
    rows = table.observations[t]
    wrong = []
    for i, hyp in enumerate(table.hypotheses):
        def median(test_id: str) -> float:
            return float(np.nanmedian(table.samples[i, table.test_index(test_id)]))
        running = {speed for speed, flows in (
            (4, median("i_motor_high") > 5.0), (1, median("i_motor_low") > 0.5),
            (3, 1.0 < median("v_pack_in_speed3") < 0.8 * volts),
            (2, 1.0 < median("v_t3_speed2") < 0.8 * volts)) if flows}
        if hyp.id == "motor.seized":
            assert running == {1, 2, 3, 4}
            running = set()
        said = table.tests[t].outcomes[int(np.argmax(rows[i]))]
        if answers[said] != running:
            wrong.append(f"{hyp.id}: answered {said}, the circuit runs speeds {sorted(running)}")
    assert wrong == []


# Hand-written looks in the words of `seen`: the circuit's own answer, to check the rows against.
RELAY_CLICKS = {  # a relay clicks as its coil pulls in (common practice)
    "listen_k3": "    state: low_beam\n    seen:\n      parts: [k3_coil]\n      since: high_beam\n"
                 "      answers: {\"yes\": [pulled_in], \"no\": [released]}\n",
    "listen_k4": "    state: high_beam\n    seen:\n      parts: [k4_coil]\n      since: low_beam\n"
                 "      answers: {\"yes\": [pulled_in], \"no\": [released]}\n",
}
STOP_LAMPS_SEEN = {  # lit from a quarter of the rated current, dim under 90 % of it (demo data)
    "look_lamps": """    seen:
      parts: [lamp_left, lamp_right, lamp_high]
      full_above: 0.9
      answers:
        all_bright: [full, full, full]
        all_dim: [dim, dim, dim]
        all_dark: [dark, dark, dark]
        left_dark: [dark, lit, lit]
        right_dark: [lit, dark, lit]
        high_dark: [lit, lit, dark]
        left_dim: [dim, full, full]
        right_dim: [full, dim, full]
        high_dim: [full, full, dim]
        other: [any, any, any]
""",
    "look_released": """    seen:
      parts: [lamp_left, lamp_right, lamp_high]
      answers: {"yes": [[lit, any, any], [any, lit, any], [any, any, lit]], "no": [dark, dark, dark]}
""",
}


def _disagreements(tmp_path: Path, path: Path, looks: dict[str, str]) -> dict[str, list[str]]:
    """The faults whose likeliest answer in a look's hand-written rows is not the one the circuit
    gives, the same look written with ``seen`` (its comment lines and rows replaced) on the same
    ruleset, look by look."""
    text = path.read_text(encoding="utf-8")
    for test_id, seen in looks.items():
        block = re.search(rf"  - id: {test_id}\n(?:    .*\n)*?    likelihoods:\n(?:      .*\n)+", text)
        assert block is not None, test_id
        head = re.sub(r"    #.*\n", "", block.group(0)[:block.group(0).index("    likelihoods:\n")])
        text = text.replace(block.group(0), head + seen)
    rewritten = tmp_path / path.name
    rewritten.write_text(text, encoding="utf-8")
    by_hand, by_circuit = predict(load_ruleset(path), cache=False), predict(load_ruleset(rewritten), cache=False)
    found = {}
    for test_id in looks:
        t = by_hand.test_index(test_id)
        assert by_circuit.test_index(test_id) == t and by_circuit.tests[t].misjudged is not None
        hand, circuit = _likeliest(by_hand, test_id), _likeliest(by_circuit, test_id)
        assert len(set(circuit.values())) > 1  # the circuit tells faults apart: the check can fail
        found[test_id] = [h for h, answer in hand.items() if answer != circuit[h]]
    return found


@pytest.mark.slow
def test_headlamp_relay_clicks_agree_with_the_circuit(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """The headlamps' relay clicks keep hand-written rows; each fault's likeliest answer must be
    the one the circuit gives (the coil pulling in as the stalk moves)."""
    monkeypatch.setenv("OHMTRAIL_CACHE", str(tmp_path / "cache"))
    found = _disagreements(tmp_path, RULESETS / "lamp" / "headlamps.yaml", RELAY_CLICKS)
    assert found == {test_id: [] for test_id in RELAY_CLICKS}


@pytest.mark.slow
def test_stop_lamp_looks_agree_with_the_circuit(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """The stop lamps' looks keep hand-written rows (issue 4's figures rest on them); each
    fault's likeliest answer must be the one the lamps' currents give."""
    monkeypatch.setenv("OHMTRAIL_CACHE", str(tmp_path / "cache"))
    found = _disagreements(tmp_path, RULESETS / "lamp" / "stop_lamps.yaml", STOP_LAMPS_SEEN)
    assert found == {test_id: [] for test_id in STOP_LAMPS_SEEN}


def _with_probes(tmp_path: Path, path: Path, probes: str) -> PredictionTable:
    """The predictions of a copy of a bundled ruleset with ``probes`` (tests, in YAML) added at
    the end of its tests: a look at or a voltage on what a hand-written look is about."""
    text = path.read_text(encoding="utf-8")
    assert text.count("\ncomplaints:\n") == 1
    rewritten = tmp_path / path.name
    rewritten.write_text(text.replace("\ncomplaints:\n", "\n" + probes + "\ncomplaints:\n"), encoding="utf-8")
    return predict(load_ruleset(rewritten), cache=False)


def _likeliest(table: PredictionTable, test_id: str) -> dict[str, str]:
    """Each hypothesis' likeliest answer to an observation."""
    t = table.test_index(test_id)
    outcomes = table.tests[t].outcomes
    return {h.id: outcomes[int(np.argmax(table.observations[t][i]))] for i, h in enumerate(table.hypotheses)}


def _answered(table: PredictionTable, test_id: str, outcome: str) -> set[str]:
    """The hypotheses whose likeliest answer to an observation is ``outcome``."""
    return {h for h, answer in _likeliest(table, test_id).items() if answer == outcome}


def _under(table: PredictionTable, test_id: str, value: float) -> set[str]:
    """The hypotheses whose median reading of a meter test is under ``value`` (SI units)."""
    t = table.test_index(test_id)
    return {h.id for i, h in enumerate(table.hypotheses) if np.nanmedian(table.samples[i, t]) < value}


@pytest.mark.slow
def test_starter_sounds_agree_with_the_solenoid(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """What the starter does at the key is written by hand (the motor's speed is no circuit
    quantity), but whether anything at all is heard is: the solenoid winding pulling in (a
    relay-type coil clicks as it pulls in, common practice). A probe look at the winding, added to
    a copy of the ruleset, says where; the likeliest answer must be silent exactly there."""
    monkeypatch.setenv("OHMTRAIL_CACHE", str(tmp_path / "cache"))
    path = RULESETS / "starter" / "starter.yaml"
    probe = """  - id: probe_solenoid
    kind: observation
    question: Does the solenoid pull in at start?
    state: cranking
    cost: 1 min
    seen: {parts: [solenoid_winding], answers: {"yes": [pulled_in], "no": [released]}}
"""
    table = _with_probes(tmp_path, path, probe)
    pulled = table.test_index("probe_solenoid")
    heard_nothing = _answered(table, "listen_solenoid", "silent")
    released = {h.id for i, h in enumerate(table.hypotheses) if table.observations[pulled][i][1] > 0.5}
    assert released and len(released) < len(table.hypotheses)
    assert heard_nothing == released, (sorted(heard_nothing - released), sorted(released - heard_nothing))


@pytest.mark.slow
def test_starter_test_lamp_agrees_with_the_voltage_at_86(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """The test lamp at relay K8's socket 86 (rows by hand) lights where the circuit puts battery
    voltage on 86 at start, measured to body metal as the lamp is clipped: a lamp lights on
    battery voltage and not on none (common practice). Its likeliest answer must be "no" exactly
    where the meter's median reading there is under half the system voltage."""
    monkeypatch.setenv("OHMTRAIL_CACHE", str(tmp_path / "cache"))
    loaded = load_ruleset(RULESETS / "starter" / "starter.yaml")
    table = predict(loaded, cache=False)
    dark = _answered(table, "lamp_k8_86", "no")
    dead = _under(table, "v_k8_86", loaded.ruleset.system_voltage / 2)
    assert dead and len(dead) < len(table.hypotheses)
    assert dark == dead, (sorted(dark - dead), sorted(dead - dark))


@pytest.mark.slow
def test_headlamp_telltales_agree_with_the_switch_outputs(tmp_path: Path,
                                                          monkeypatch: pytest.MonkeyPatch) -> None:
    """The green lights-on tell-tale is fed from the light switch output, the blue high-beam one
    from the dip switch's high output, each grounded in the cluster (rows by hand): a tell-tale
    is dark where its feed has no voltage (common practice). The light switch output has no test
    of its own, so a probe voltage there is added to a copy."""
    monkeypatch.setenv("OHMTRAIL_CACHE", str(tmp_path / "cache"))
    path = RULESETS / "lamp" / "headlamps.yaml"
    probe = """  - {id: probe_ls_out, kind: voltage, title: light switch output, at: LS_OUT, state: low_beam, cost: 1 min}
"""
    table = _with_probes(tmp_path, path, probe)
    half = load_ruleset(path).ruleset.system_voltage / 2
    for look, feed in (("look_telltale_lights", "probe_ls_out"), ("look_telltale_high", "v_dip_high")):
        dark, dead = _answered(table, look, "no"), _under(table, feed, half)
        assert dead and len(dead) < len(table.hypotheses), look
        assert dark == dead, (look, sorted(dark - dead), sorted(dead - dark))


@pytest.mark.slow
def test_blower_still_or_spinning_agrees_with_its_current(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """Whether the blower spins on speed 4 and stays still with the key out (rows by hand): a
    motor with no current does not turn; one with its current turns, but for a seized one, which
    draws more than a running one and turns nothing (common practice). "Still" on speed 4 must be
    the likeliest answer exactly where the speed 4 current is under a quarter of the healthy
    one, the seized motor added; "runs" with the key out exactly where the motor's feed is live."""
    monkeypatch.setenv("OHMTRAIL_CACHE", str(tmp_path / "cache"))
    loaded = load_ruleset(RULESETS / "motor" / "blower.yaml")
    table = predict(loaded, cache=False)
    healthy = float(np.nanmedian(table.samples[table.hypothesis_index("none"), table.test_index("i_motor_high")]))
    assert healthy > 10  # a blower on its top speed draws tens of amps
    no_current = _under(table, "i_motor_high", healthy / 4)
    assert no_current and "motor.seized" not in no_current
    assert _answered(table, "spins_on_4", "still") == no_current | {"motor.seized"}
    live = set(h.id for h in table.hypotheses) - _under(table, "v_m_pos_key_off", loaded.ruleset.system_voltage / 2)
    assert _answered(table, "still_key_off", "runs") == live == {"k7_contact.stuck_closed"}


@pytest.mark.slow
def test_starter_jumper_agrees_with_its_sounds(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """Bridging relay K8's socket 30 to 87 feeds the solenoid from F2 past the key switch, the
    relay and the clutch switch (the test's own instructions; common practice). So the starter
    cranks for a fault on that bypassed side, and otherwise does what it does at the key:
    cranks where it cranks normally, clicks or turns slowly where it does, nothing where it is
    silent. Each fault's likeliest answers to the two must agree so."""
    monkeypatch.setenv("OHMTRAIL_CACHE", str(tmp_path / "cache"))
    table = predict(load_ruleset(RULESETS / "starter" / "starter.yaml"), cache=False)
    bypassed = ("f10", "key_start", "w_key", "k8_coil", "w_clutch", "clutch_switch", "k8_contact")
    at_key = {"cranks_normally": "cranks", "cranks_slowly": "clicks_or_slow", "clicks_only": "clicks_or_slow",
              "silent": "nothing"}
    expected = {h: "cranks" if h.split(".")[0] in bypassed else at_key[answer]
                for h, answer in _likeliest(table, "listen_solenoid").items()}
    assert set(expected.values()) == {"cranks", "clicks_or_slow", "nothing"}
    jumped = _likeliest(table, "jumper_k8")
    assert {h: answer for h, answer in jumped.items() if answer != expected[h]} == {}


FUSE_LOOKS = {  # ruleset -> (its fuse look, the answer naming each fuse, the answer naming none)
    "lamp/headlamps.yaml": ("look_fuses", {f"f{n}": f"F{n}" for n in (3, 4, 14, 15, 16, 17)}, "none_blown"),
    "lamp/stop_lamps.yaml": ("look_fuse", {"f12": "yes"}, "no"),
    "motor/blower.yaml": ("look_fuses", {"f20": "F20", "f21": "F21"}, "none_blown"),
    "starter/starter.yaml": ("look_fuses", {"f2": "F2", "f10": "F10"}, "none_blown"),
}


@pytest.mark.slow
@pytest.mark.parametrize("rel", sorted(FUSE_LOOKS))
def test_fuse_looks_name_the_fuse_the_circuit_blows(rel: str, tmp_path: Path,
                                                    monkeypatch: pytest.MonkeyPatch) -> None:
    """A look for a visibly blown fuse (rows by hand) must name, as each fault's likeliest
    answer, the fuse the circuit blows under it, or none: a short that blows a fuse shows as
    that fuse (common practice). A probe ohms test across each fuse on the bench (OL: blown) is
    added to a copy of the ruleset to say which."""
    monkeypatch.setenv("OHMTRAIL_CACHE", str(tmp_path / "cache"))
    look, names, none = FUSE_LOOKS[rel]
    path = RULESETS / rel
    fuses = [c for c in load_ruleset(path).ruleset.components if c.type == "fuse"]
    assert sorted(f.id for f in fuses) == sorted(names)
    probes = "".join(f"  - {{id: probe_{f.id}, kind: resistance, between: [{f.nodes[0]}, {f.nodes[1]}], "
                     f"only: [{f.id}], cost: 1 min}}\n" for f in fuses)
    table = _with_probes(tmp_path, path, probes)
    expected = {}
    for i, h in enumerate(table.hypotheses):
        blown = [f.id for f in fuses if np.isinf(np.nanmedian(table.samples[i, table.test_index(f"probe_{f.id}")]))]
        assert len(blown) <= 1, h.id  # one fuse at most goes (the most overloaded first)
        expected[h.id] = names[blown[0]] if blown else none
    assert set(expected.values()) == set(names.values()) | {none}  # every fuse blows under some fault
    assert _likeliest(table, look) == expected


def test_one_vehicle_is_described_one_way() -> None:
    """Rulesets for one vehicle are read side by side by its fleet engineer. A preparation id
    two of them share is the same access work (one title, cost and instructions), and relay
    coils of one resistance are the one relay type, pulling in at one current (the van's
    rulesets swap K8 for the horn relay and K3 for K4 as "the same 4-pin mini relay")."""
    preps: dict[tuple[str, str], set[object]] = {}
    coils: dict[tuple[str, float], set[float]] = {}
    for path in FILES:
        rs = load_ruleset(path).ruleset
        for vehicle in {v.model for v in rs.applies_to}:
            for ref, prep in rs.preparations.items():
                preps.setdefault((vehicle, ref), set()).add((prep.title, prep.cost, prep.instructions))
            for comp in rs.components:
                if comp.type == "relay_coil":
                    coils.setdefault((vehicle, float(comp.resistance)), set()).add(float(comp.pull_in))
    assert all(len(work) == 1 for work in preps.values()), {k: v for k, v in preps.items() if len(v) > 1}
    assert any(len(v) == 1 for v in coils.values())  # there are relay coils to compare
    assert all(len(pull_in) == 1 for pull_in in coils.values()), coils


def test_one_vehicle_numbers_each_fuse_once() -> None:
    """A fuse number on one vehicle is one fuse: a ruleset that names a fuse it does not model
    (the starter's fuel pump fuse, pulled for cranking) must not name one another ruleset of
    the same vehicle models as something else (a headlamp's fuse), or the technician pulls the
    wrong one; a fuse two rulesets model is rated and labelled alike."""
    modelled: dict[tuple[str, str], dict[str, tuple[str, float]]] = {}
    mentioned: dict[tuple[str, str], set[str]] = {}
    for path in FILES:
        rs = load_ruleset(path).ruleset
        named = {f"f{n}" for n in re.findall(r"\bF(\d+)\b", path.read_text(encoding="utf-8"))}
        for vehicle in {v.model for v in rs.applies_to}:
            for comp in rs.components:
                if comp.type == "fuse":
                    modelled.setdefault((vehicle, comp.id), {})[_id(path)] = (comp.label, float(comp.rating))
            mentioned[(vehicle, _id(path))] = named - {c.id for c in rs.components}
    assert any(len(owners) > 0 for owners in modelled.values()) and any(mentioned.values())
    clashes = {(ruleset, fuse): sorted(modelled[(vehicle, fuse)])
               for (vehicle, ruleset), fuses in mentioned.items() for fuse in fuses if (vehicle, fuse) in modelled}
    assert clashes == {}
    assert all(len(set(owners.values())) == 1 for owners in modelled.values())

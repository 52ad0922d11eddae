"""The trail drawing: DOT source of a known session (golden file), escaping, A4 width, no dot.

The session is demo data (tests/data/stop_lamp_session.json). The golden DOT file is
tests/data/trail_stop_lamp.dot; after an intended change to the drawing, regenerate it with
``OHMTRAIL_UPDATE_GOLDEN=1 pytest tests/test_trail.py`` and review the diff.
"""

from __future__ import annotations

import html
import json
import os
import re
import shutil
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from assistant.errors import OutputError
from assistant.record import SessionRecord, Step
from assistant.trail import INSTALL_HINT, dot_source, html_text, render_trail

DATA = Path(__file__).parent / "data"
GOLDEN = DATA / "trail_stop_lamp.dot"
needs_dot = pytest.mark.skipif(shutil.which("dot") is None, reason="graphviz dot not installed")

HOSTILE = ('say "hi" \\ back\\slash \\" <b>bold</b> {braces} } ]; x [label=y]\n'
           '"; digraph { evil }\r\n</TD></TR></TABLE>> & &amp; \x1b[31m')


def load_session() -> SessionRecord:
    return SessionRecord.model_validate_json((DATA / "stop_lamp_session.json").read_text("utf-8"))


def _normalised(source: str) -> list[str]:
    # Indentation differs between versions of the graphviz package; the content must not.
    return [line.strip() for line in source.splitlines() if line.strip()]


def test_dot_source_of_the_demo_session_matches_the_golden_file() -> None:
    source = dot_source(load_session())
    if os.environ.get("OHMTRAIL_UPDATE_GOLDEN"):
        GOLDEN.write_text(source, encoding="utf-8")
    assert _normalised(source) == _normalised(GOLDEN.read_text(encoding="utf-8"))


def test_the_drawing_holds_every_part_of_the_path() -> None:
    source = dot_source(load_session())
    for text in ("Complaint", "Left stop lamp is dim", "rule fired", "high_mileage_rear_ground",
                 "taken back: step 2", "skipped: i_left", "re-measure: drop_left_ground",
                 "read <B>3.1 V</B>", "healthy 4–31 mV", "Conclusion",
                 "w_left_gnd.high_resistance</B>  98.1 %", "Repair",
                 "Verification: drop_left_ground", "read <B>12 mV</B>", "session closed"):
        assert text in source, text
    # the answer taken back is struck through and linked from the undo step
    assert "<S>1.23 V</S>" in source
    assert "s3:e -> s2:e" in source
    # the re-measure links back to the reading it repeats
    assert "s9:e -> s7:e" in source


def _hostile_session() -> SessionRecord:
    record = load_session()
    steps = list(record.steps)
    steps[8] = steps[8].model_copy(update={"note": HOSTILE})  # a note beside a step
    steps[5] = steps[5].model_copy(update={"note": HOSTILE, "test_id": 'i_left" ]{'})  # a skip
    return record.model_copy(update={"steps": tuple(steps), "complaint": HOSTILE,
                                     "id": 'x"<i>{}\\'})


def test_html_text_escapes_markup_and_turns_newlines_into_breaks() -> None:
    out = html_text('a "q" <b>x</b> & {y}\\\nz\x00')
    assert out == 'a &quot;q&quot; &lt;b&gt;x&lt;/b&gt; &amp; {y}\\<BR ALIGN="LEFT"/>z'


def test_hostile_notes_are_escaped_in_the_dot_source() -> None:
    source = dot_source(_hostile_session())
    assert "<b>bold" not in source and "&lt;b&gt;bold&lt;/b&gt;" in source
    assert "</TD></TR></TABLE>> &" not in source
    assert "&lt;/TD&gt;&lt;/TR&gt;&lt;/TABLE&gt;&gt; &amp; &amp;amp;" in source
    assert "\x1b" not in source and "\r" not in source
    assert "digraph { evil }" in source  # kept as text inside a label


def _node_names(json_text: str) -> list[str]:
    return sorted(o["name"] for o in json.loads(json_text).get("objects", [])
                  if "nodes" not in o)  # subgraphs list their nodes; plain nodes do not


@needs_dot
def test_hostile_notes_add_no_node_and_show_as_written() -> None:
    plain = render_trail(load_session(), "dot")
    hostile = _hostile_session()
    import graphviz

    def nodes(record_source: bytes) -> list[str]:
        return _node_names(graphviz.Source(record_source.decode()).pipe(format="json").decode())

    assert nodes(render_trail(hostile, "dot").data) == nodes(plain.data)
    svg = render_trail(hostile, "svg").data.decode("utf-8")
    # dot writes label text XML-escaped into the SVG; lines are wrapped at spaces, so the
    # text elements joined by spaces hold the note's words whole
    text = " ".join(html.unescape(t) for t in re.findall(r"<text[^>]*>(.*?)</text>", svg))
    for piece in ('say "hi" \\ back\\slash \\"', "<b>bold</b>", "{braces} } ]; x [label=y]",
                  '"; digraph { evil }', "</TD></TR></TABLE>> & &amp;"):
        assert piece in text, piece


def _long_session(readings: int) -> SessionRecord:
    record = load_session()
    steps = [record.steps[0]]
    for i in range(1, readings + 1):
        steps.append(Step(index=i, kind="reading", at=f"2026-12-01T09:{i % 60:02d}:00Z",
                          test_id="drop_left_ground", reading=0.1 * i, unit="V",
                          expected_low=0.004, expected_high=0.031, verdict="high",
                          top=(("w_left_gnd.high_resistance", 0.5),
                               ("lamp_left.high_resistance", 0.3),
                               ("g_rear.high_resistance", 0.1)),
                          note="probe moved to the eyelet bolt head, reading steady" * (i % 2)))
        if i % 5 == 0:
            steps.append(Step(index=len(steps), kind="note", at="2026-12-01T09:59:00Z",
                              note="a longer remark about the state of the harness " * 3))
    steps = [s.model_copy(update={"index": n}) for n, s in enumerate(steps)]
    return record.model_copy(update={"steps": tuple(steps), "status": "open"})


@needs_dot
def test_a_thirty_step_trail_fits_a4_width_without_shrinking_the_text() -> None:
    # A4 is 210 mm wide (ISO 216); less 15 mm margins each side that is 180 mm = 510 pt, the
    # frame of the PDF report.
    svg = render_trail(_long_session(30), "svg").data.decode("utf-8")
    width = float(re.search(r'<svg width="([\d.]+)pt"', svg).group(1))
    scale = float(re.search(r'transform="scale\(([\d.]+)', svg).group(1))
    assert width <= 510.0
    assert scale >= 0.95  # graphviz did not have to shrink the drawing to fit
    assert "IN PROGRESS" in svg and "in progress" in svg


def test_an_open_session_is_marked_in_progress() -> None:
    source = dot_source(_long_session(3))
    assert "IN PROGRESS" in source and "the session is still open" in source


def test_a_session_with_no_steps_still_draws() -> None:
    record = load_session().model_copy(update={"steps": (), "status": "open",
                                               "complaint": None})
    assert "(none given)" in dot_source(record)


def test_without_dot_the_source_comes_back_with_a_hint(monkeypatch: pytest.MonkeyPatch,
                                                      tmp_path: Path) -> None:
    monkeypatch.setenv("PATH", str(tmp_path))  # an empty folder: no dot on it
    drawing = render_trail(load_session(), "svg")
    assert drawing.format == "dot" and drawing.hint == INSTALL_HINT
    assert drawing.data.decode("utf-8") == dot_source(load_session())
    assert "\n" not in INSTALL_HINT


def test_an_unknown_format_is_a_clear_error() -> None:
    with pytest.raises(OutputError, match="unknown drawing format"):
        render_trail(load_session(), "gif")


@needs_dot
@pytest.mark.parametrize(("fmt", "magic"), [("svg", b"<?xml"), ("pdf", b"%PDF"),
                                           ("png", b"\x89PNG")])
def test_each_format_renders(fmt: str, magic: bytes) -> None:
    drawing = render_trail(load_session(), fmt)
    assert drawing.format == fmt and drawing.hint is None
    assert drawing.data.startswith(magic)


@needs_dot
@settings(max_examples=30, deadline=None)
@given(text=st.text(max_size=120))
def test_any_text_leaves_the_drawing_whole(text: str) -> None:
    # Property: whatever a note or complaint holds, dot parses the source and finds the same
    # nodes as for the plain session.
    import graphviz

    record = load_session()
    steps = list(record.steps)
    steps[8] = steps[8].model_copy(update={"note": text})
    hostile = record.model_copy(update={"steps": tuple(steps), "complaint": text})
    plain = _node_names(graphviz.Source(dot_source(record)).pipe(format="json").decode())
    drawn = _node_names(graphviz.Source(dot_source(hostile)).pipe(format="json").decode())
    assert drawn == plain


def test_a_conclusion_without_a_certain_fault_says_so() -> None:
    record = load_session().model_copy(update={"diagnosis": None, "probability": None,
                                               "status": "abandoned"})
    source = dot_source(record)
    assert "no fault certain enough</B>; most likely w_left_gnd.high_resistance" in source
    assert "<B>abandoned</B> before a conclusion" in source


def test_a_group_conclusion_reads_one_of_its_members() -> None:
    record = load_session().model_copy(update={
        "ambiguity_group": ("w_left_gnd.high_resistance", "lamp_left.high_resistance"),
        "group_probability": 0.993})
    source = dot_source(record)
    for part in ("<B>one of:</B> w_left_gnd.high_resistance,", "lamp_left.high_resistance together 99.3\xa0%",
                 "most likely w_left_gnd.high_resistance\xa098.1\xa0%"):  # the members wrap to the box
        assert part in source
    assert "<B>w_left_gnd.high_resistance</B>  98.1 %" not in source  # not as one certain part
    with_none = record.model_copy(update={"ambiguity_group": ("w_left_gnd.high_resistance", "none")})
    assert ("<B>no fault found beyond what the tests can resolve</B>: one of w_left_gnd.high_resistance,"
            in dot_source(with_none))


def test_the_conclusion_names_the_test_that_is_to_prove_the_repair() -> None:
    record = load_session()
    steps = list(record.steps)
    steps[11] = steps[11].model_copy(update={"test_id": "drop_left_ground"})
    source = dot_source(record.model_copy(update={"steps": tuple(steps)}))
    assert "verify with: drop_left_ground" in source


def test_notes_after_one_step_stack_beside_it() -> None:
    record = load_session()
    steps = list(record.steps)
    extra = [steps[8].model_copy(update={"index": 9 + i, "note": f"remark {i}"}) for i in range(2)]
    renumbered = [s.model_copy(update={"index": n}) for n, s in
                  enumerate(steps[:9] + extra + steps[9:])]
    source = dot_source(record.model_copy(update={"steps": tuple(renumbered)}))
    # the first note is level with step 7; the next two hang under it, not beside it
    assert "s7 -> s8 [arrowhead=none" in source
    assert "s8 -> s9 [arrowhead=none" in source and "s9 -> s10 [arrowhead=none" in source
    assert "s7 -> s11" in source  # the path goes on from the step, not from a note

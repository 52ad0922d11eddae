"""The claim report: a PDF whose text reads back, self-contained HTML, escaping, open sessions.

The session is demo data (tests/data/stop_lamp_session.json). The PDF is read back with
pypdf, an independent reader, and the HTML with the standard library's html.parser.
"""

from __future__ import annotations

import io
import json
import re
import shutil
from collections import Counter
from html.parser import HTMLParser
from pathlib import Path

import pytest
from pypdf import PdfReader

from assistant.errors import OutputError
from assistant.export import seal_steps, session_digest, verify_export
from assistant.record import SessionRecord
from assistant.report import (
    render_report,
    report_content,
    report_html,
    write_output,
    write_outputs,
)
from assistant.trail import INSTALL_HINT

DATA = Path(__file__).parent / "data"
needs_dot = pytest.mark.skipif(shutil.which("dot") is None, reason="graphviz dot not installed")
HOSTILE = 'say "hi" \\ back\\slash <b>bold</b> {braces} }\nnext line & &amp; <script>x</script>'


def load_session() -> SessionRecord:
    return SessionRecord.model_validate_json((DATA / "stop_lamp_session.json").read_text("utf-8"))


def pdf_text(data: bytes) -> str:
    text = "\n".join(page.extract_text() for page in PdfReader(io.BytesIO(data)).pages)
    return re.sub(r"\s+", " ", text)


def test_the_pdf_reads_back_with_the_diagnosis_and_the_facts() -> None:
    record = load_session()
    data = render_report(record, "pdf")
    assert data.startswith(b"%PDF")
    text = pdf_text(data)
    for expected in ("w_left_gnd.high_resistance (98.1 %)", "Stopped because: threshold reached",
                     "lamp_left.high_resistance", "LARKSPUR-CV2-0017", "182,400 km",
                     "Left stop lamp is dim; the others are bright", "Technician 04 (demo)",
                     "stop_lamps version 1.0.0", "default", "none recorded",
                     "Cut back the corroded ground wire", "drop_left_ground: 12 mV, healthy 4–31 mV",
                     "pedal prop must not slip", "Session digest (SHA-256):"):
        assert expected in text, expected
    # every step is there with its time; the long hashes may wrap, so compare without spaces
    for step in record.steps:
        assert step.at[11:19] in text
    squeezed = text.replace(" ", "")
    assert session_digest(record) in squeezed
    assert record.ruleset_sha256 in squeezed


def test_the_html_is_self_contained() -> None:
    page = report_html(load_session())
    assert page.startswith("<!DOCTYPE html>") and "<style>" in page
    assert "<svg" in page or INSTALL_HINT.split(",")[0] in page
    assert not re.search(r"<(script|link|img|iframe)\b", page)
    assert not re.search(r"(src|href)=\"(https?:)?//", page)
    assert "w_left_gnd.high_resistance (98.1 %)" in page


class _Tags(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.tags: Counter[str] = Counter()
        self.text: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self.tags[tag] += 1

    def handle_data(self, data: str) -> None:
        self.text.append(data)


def _parse(page: str) -> _Tags:
    # The drawing is checked in test_trail.py; here the page around it.
    parser = _Tags()
    parser.feed(re.sub(r"<svg.*</svg>", "", page, flags=re.S))
    return parser


def _hostile(record: SessionRecord) -> SessionRecord:
    steps = list(record.steps)
    steps[8] = steps[8].model_copy(update={"note": HOSTILE})
    steps[4] = steps[4].model_copy(update={"reading_text": HOSTILE, "verdict": HOSTILE})
    steps = [s.model_copy(update={"digest": None}) for s in steps]
    return record.model_copy(update={
        "steps": seal_steps(steps), "technician": HOSTILE, "complaint": HOSTILE,
        "fault_codes": (HOSTILE,), "repair": HOSTILE, "alternatives": ((HOSTILE, 0.01),)})


def test_hostile_text_adds_no_element_to_the_html_and_shows_as_written() -> None:
    plain = _parse(report_html(load_session()))
    hostile_page = report_html(_hostile(load_session()))
    hostile = _parse(hostile_page)
    assert "<b>bold</b>" not in hostile_page and "<script>" not in hostile_page
    # the same elements, except one <br> per user text that held a line break
    extra = hostile.tags - plain.tags
    assert set(extra) <= {"br"}
    assert hostile.tags["b"] == plain.tags["b"] and hostile.tags["script"] == 0
    text = "".join(hostile.text)
    assert 'say "hi" \\ back\\slash <b>bold</b> {braces} }' in text
    assert "next line & &amp; <script>x</script>" in text


def test_hostile_text_prints_as_written_in_the_pdf() -> None:
    text = pdf_text(render_report(_hostile(load_session()), "pdf"))
    assert 'say "hi" \\ back\\slash <b>bold</b> {braces} }' in text
    assert "<script>x</script>" in text


def _open_session() -> SessionRecord:
    record = load_session()
    return record.model_copy(update={
        "steps": record.steps[:8], "status": "open", "finished": None, "diagnosis": None,
        "probability": None, "alternatives": (), "stopped_because": None, "repair": None,
        "verification": None})


def test_an_open_session_is_marked_in_progress() -> None:
    record = _open_session()
    text = pdf_text(render_report(record, "pdf"))
    assert "IN PROGRESS" in text and "no diagnosis yet" in text and "not yet done" in text
    page = report_html(record)
    assert 'class="banner"' in page and "IN PROGRESS" in page


def test_a_session_with_no_steps_reports() -> None:
    record = _open_session().model_copy(update={"steps": ()})
    content = report_content(record)
    assert content.steps == () and content.step_count == 0
    assert "IN PROGRESS" in pdf_text(render_report(record, "pdf"))


def test_a_record_edited_in_the_store_says_so_at_the_top() -> None:
    record = load_session()
    steps = list(record.steps)
    steps[7] = steps[7].model_copy(update={"reading": 0.02})  # digest kept from before
    edited = record.model_copy(update={"steps": tuple(steps)})
    page = report_html(edited)
    assert "Integrity check failed" in page and "step 7" in page
    assert "Integrity check failed" in pdf_text(render_report(edited, "pdf"))


def test_the_report_carries_the_cautions() -> None:
    from assistant import cautions

    record = load_session()
    content = report_content(record)
    assert content.cautions == record.cautions + cautions.EVERY_PAGE
    text = pdf_text(render_report(record, "pdf"))
    assert "maker's procedures" in text and "high-voltage cabling" in text
    # a record that kept no cautions gets them all: which applied can no longer be told
    bare = record.model_copy(update={"cautions": ()})
    assert report_content(bare).cautions == cautions.ALL
    assert "fused current jack" in pdf_text(render_report(bare, "pdf"))


def test_write_outputs_writes_the_four_files_with_one_digest(tmp_path: Path) -> None:
    record = load_session()
    paths = write_outputs(record, tmp_path / "demo-out")
    assert [p.name for p in paths] == [
        f"{record.id}-trail.svg" if shutil.which("dot") else f"{record.id}-trail.dot",
        f"{record.id}-report.pdf", f"{record.id}-report.html", f"{record.id}-export.json"]
    export = json.loads(paths[3].read_text("utf-8"))
    result = verify_export(export)
    assert result.intact
    assert result.digest in paths[2].read_text("utf-8")
    assert "w_left_gnd.high_resistance" in pdf_text(paths[1].read_bytes())


def test_an_unwritable_path_is_a_clear_error(tmp_path: Path) -> None:
    blocker = tmp_path / "a-file"
    blocker.write_text("x")
    with pytest.raises(OutputError, match="cannot write") as info:
        write_output(blocker / "report.pdf", b"%PDF")
    assert "\n" not in str(info.value)
    with pytest.raises(OutputError, match="cannot create the folder"):
        write_outputs(load_session(), blocker / "out")


def test_without_dot_the_report_says_why_the_drawing_is_missing(
        monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> None:
    monkeypatch.setenv("PATH", str(tmp_path))
    record = load_session()
    page = report_html(record)
    assert "<svg" not in page and "install graphviz" in page and "digraph trail" in page
    assert "install graphviz" in pdf_text(render_report(record, "pdf"))


@needs_dot
def test_a_long_trail_is_cut_between_nodes_into_page_high_slices() -> None:
    from reportlab.platypus import Image

    from assistant.report_pdf import FRAME_HEIGHT, FRAME_WIDTH, _cut_rows, _trail_slices
    from assistant.trail import render_trail

    record = load_session()
    steps = [record.steps[0]] + [s.model_copy(update={"index": i})
                                 for i, s in enumerate(list(record.steps[2:11]) * 4, start=1)]
    long = record.model_copy(update={"steps": tuple(steps), "status": "open"})
    drawing = render_trail(long, "png")
    assert drawing.node_spans  # one span per node, as fractions of the picture's height
    assert all(0.0 <= a < b <= 1.0 for a, b in drawing.node_spans)
    slices = _trail_slices(drawing.data, drawing.node_spans)
    assert len(slices) >= 2
    assert all(isinstance(s, Image) and s.drawHeight <= FRAME_HEIGHT for s in slices)
    assert all(s.drawWidth <= FRAME_WIDTH + 0.01 for s in slices)
    height = 10_000
    for cut in _cut_rows(height, drawing.node_spans, 2_000):
        assert not any(a * height <= cut <= b * height for a, b in drawing.node_spans)


def test_cut_rows_fall_between_spans_and_respect_the_limit() -> None:
    from assistant.report_pdf import _cut_rows

    spans = [(0.0, 0.18), (0.2, 0.38), (0.4, 0.58), (0.6, 0.78), (0.8, 1.0)]
    cuts = _cut_rows(1000, spans, 300)
    assert cuts == [196, 396, 596, 796]  # the lowest free row under each limit (3 rows clear)
    assert _cut_rows(1000, [], 300) == [300, 600, 900]  # no spans known: cut at the limit
    assert _cut_rows(200, spans, 300) == []


def test_an_unknown_report_format_is_a_clear_error() -> None:
    with pytest.raises(OutputError, match="unknown report format"):
        render_report(load_session(), "docx")


STOP_LAMPS = Path(__file__).parent.parent / "rulesets" / "lamp" / "stop_lamps.yaml"


def test_ruleset_names_cover_every_test_and_fault() -> None:
    from assistant.display import ruleset_names
    from assistant.ruleset import fault_list, load_ruleset

    ruleset = load_ruleset(STOP_LAMPS).ruleset
    names = ruleset_names(ruleset)
    assert set(names) == {"none"} | {f.id for f in fault_list(ruleset)} | {t.id for t in ruleset.tests}
    assert names["w_left_gnd.high_resistance"] == "left lamp ground wire, black: high resistance"
    assert names["drop_left_ground"] == "Voltage drop on the left lamp's ground side"


def test_the_report_names_tests_and_faults_from_the_unchanged_ruleset(tmp_path: Path) -> None:
    from assistant.report import session_names

    from assistant.ruleset import load_ruleset

    # the bundled ruleset moves on; the session is taken to have used it as it is now
    record = load_session().model_copy(update={"ruleset_path": str(STOP_LAMPS),
                                               "ruleset_sha256": load_ruleset(STOP_LAMPS).sha256})
    names = session_names(record)
    page = report_html(record, names)
    assert "left lamp ground wire, black: high resistance (98.1 %)" in page
    assert "Fault id: <code>w_left_gnd.high_resistance</code>" in page
    assert "reading: Voltage drop on the left lamp&#x27;s ground side" in page
    # a ruleset file that changed since the session, or is gone, gives ids instead
    changed = tmp_path / "stop_lamps.yaml"
    changed.write_text(STOP_LAMPS.read_text("utf-8") + "\n# edited\n", encoding="utf-8")
    assert session_names(record.model_copy(update={"ruleset_path": str(changed)})) == {}
    assert session_names(record.model_copy(update={"ruleset_path": str(tmp_path / "no")})) == {}


def test_faults_that_no_test_tells_apart_are_named() -> None:
    record = load_session().model_copy(update={
        "ambiguity_group": ("w_left_gnd.high_resistance", "lamp_left.high_resistance"),
        "group_probability": 0.993})
    page, pdf = report_html(record), pdf_text(render_report(record, "pdf"))
    for expected in ("No test left can tell the diagnosis from: lamp_left.high_resistance.",
                     "One of: w_left_gnd.high_resistance; lamp_left.high_resistance (together 99.3 %; "
                     "most likely w_left_gnd.high_resistance 98.1 %)"):
        assert expected in page
        assert expected in pdf
    # shown as a group, never as one certain part
    assert '<p class="diagnosis">w_left_gnd.high_resistance (98.1 %)</p>' not in page
    assert "Fault ids: <code>w_left_gnd.high_resistance, lamp_left.high_resistance</code>" in page


def test_no_fault_in_a_group_says_what_the_tests_cannot_resolve() -> None:
    record = load_session().model_copy(update={
        "diagnosis": "lamp_left.high_resistance", "probability": 0.54,
        "ambiguity_group": ("lamp_left.high_resistance", "none"), "group_probability": 0.97})
    content = report_content(record)
    assert content.diagnosis == ("No fault found beyond what the tests can resolve: one of "
                                 "lamp_left.high_resistance; no fault")
    assert content.diagnosis_probability == "together 97.0 %; most likely lamp_left.high_resistance 54.0 %"


def test_observation_steps_and_the_verification_test_read_plainly() -> None:
    record = load_session()
    steps = list(record.steps)
    steps[11] = steps[11].model_copy(update={"test_id": "look_lamps"})
    steps[13] = steps[13].model_copy(update={
        "test_id": "look_lamps", "reading": None, "unit": None, "reading_text": "all_bright",
        "expected_low": None, "expected_high": None, "verdict": "as expected"})
    content = report_content(record.model_copy(update={"steps": tuple(steps)}))
    assert content.steps[11].what == "conclusion; verify with: look_lamps"
    assert content.verification.startswith("look_lamps: all_bright: as expected (step 13, ")

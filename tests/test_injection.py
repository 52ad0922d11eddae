"""Hostile text in every field a person fills in: stored as given, rendered inertly everywhere.

Notes, the technician's name, vehicle ids, the complaint, fault codes, the repair and the
verification each carry HTML, DOT, SQL, format strings, control characters, right-to-left
overrides and, in one field, a megabyte. The store (SQLite and PostgreSQL) must give back the
record unchanged; the trail drawing must have the same nodes as the same session with plain
text; the HTML report the same elements and attributes; the PDF must build, open and show the
text; bidirectional overrides and control characters never reach a rendering; the seal still
verifies. (tests/test_trail.py and tests/test_report.py cover quotes, braces and markup in
notes; this file covers every field at once, with the store.)
"""

from __future__ import annotations

import io
import json
import re
import shutil
import sqlite3
import xml.etree.ElementTree as ET
from collections import Counter
from html.parser import HTMLParser
from pathlib import Path

import pytest
from pypdf import PdfReader

from assistant.export import check_record, export_json, seal_steps, verify_export
from assistant.record import SessionRecord, Step, VehicleInfo
from assistant.report import render_report
from assistant.store import open_store
from assistant.trail import render_trail

DATA = Path(__file__).parent / "data"
needs_dot = pytest.mark.skipif(shutil.which("dot") is None, reason="graphviz dot not installed")

BIDI = "\u202e\u202a\u202b\u202c\u202d\u2066\u2067\u2068\u2069"
HOSTILE = (
    "<script>alert(1)</script>",
    '<img src=x onerror="alert(1)">',
    '"]; evil [label="pwned"]; s0 -> evil; //',
    "}} digraph { injected } {{",
    "<<B>x</B>> <TABLE><TR><TD>cell</TD></TR></TABLE>",
    "\\N \\G \\l \\\\ back\\slash",
    "'; DROP TABLE ohmtrail_steps; --",
    "1' OR '1'='1",
    "\x1b[31mred\x1b[0m bell\x07 nul\x00 del\x7f",
    f"reads {BIDI[0]}V 4.21{BIDI[3]} isolated {BIDI[5]}x{BIDI[8]}",
    "line one\nline two\r\nline three\rfour",
    "%s %n {0} ${HOME} $(id) `id`",
    "Ωμ 😀 \u200f",
)
MEGABYTE = ("long note <b>" + "x" * 60 + "</b> ") * (1_000_000 // 76)


def _base() -> SessionRecord:
    return SessionRecord.model_validate_json((DATA / "stop_lamp_session.json").read_text("utf-8"))


def _with_text(record: SessionRecord, texts: tuple[str, ...], big: str | None) -> SessionRecord:
    """The record with each person-given field set from ``texts`` (cycled), and a note of ``big``."""
    pick = [texts[i % len(texts)] for i in range(12)]
    steps = []
    for step in record.steps:
        note = pick[step.index % len(pick)] if step.note is not None or step.kind == "note" else None
        steps.append(step.model_copy(update={"note": note, "digest": None}))
    steps.append(Step(index=len(steps), kind="note", at="2026-12-01T10:00:00.000+00:00",
                      note=big if big is not None else pick[0]))
    return record.model_copy(update={
        "technician": pick[1], "complaint": pick[2], "fault_codes": (pick[3], pick[4]),
        "vehicle": VehicleInfo(vin=pick[5], fleet_number=pick[6], odometer_km=81234.0, model_year=2021),
        "repair": pick[7], "verification": pick[8], "stopped_because": pick[9],
        "steps": seal_steps(steps),
    })


def hostile_record(big: bool = True) -> SessionRecord:
    return _with_text(_base(), HOSTILE, MEGABYTE if big else None)


def plain_record() -> SessionRecord:
    plain = tuple(f"plain text {i}" for i in range(len(HOSTILE)))
    return _with_text(_base(), plain, "plain long note")


# --------------------------------------------------------------------------- the store


def _round_trip(url: str) -> None:
    record = hostile_record()
    with open_store(url) as store:
        store.create(record)
        back = store.load(record.id)
        assert back == record
        assert check_record(back).intact
        listed = {s.id: s for s in store.list()}
        assert listed[record.id].technician == record.technician


def test_sqlite_keeps_hostile_text_as_given(tmp_path: Path) -> None:
    db = tmp_path / "s.db"
    _round_trip(f"sqlite:///{db}")
    with sqlite3.connect(db) as conn:  # the SQL in the notes was data, not statements
        tables = {r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
        assert {"ohmtrail_sessions", "ohmtrail_steps", "ohmtrail_meta"} <= tables
        assert conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"


def test_postgresql_keeps_hostile_text_as_given(pg_url: str) -> None:
    # Found here: PostgreSQL text columns refuse NUL, and the store put the step's time and
    # the session's start time into such columns as given (the JSON beside them is the record).
    _round_trip(pg_url)


def test_nul_in_query_columns_round_trips_on_postgresql(pg_url: str) -> None:
    record = _base().model_copy(update={"started": "2026-12-01\x00T09", "steps": seal_steps(
        [s.model_copy(update={"at": s.at + "\x00", "digest": None}) for s in _base().steps])})
    with open_store(pg_url) as store:
        store.create(record)
        assert store.load(record.id) == record


# --------------------------------------------------------------------------- the trail


def _graph_nodes(dot: bytes) -> list[str]:
    import graphviz

    data = json.loads(graphviz.Source(dot.decode("utf-8")).pipe(format="json").decode("utf-8"))
    return sorted(o.get("name", "") for o in data.get("objects", []))


def _svg_shape(svg: bytes) -> Counter[str]:
    root = ET.fromstring(svg)
    shape: Counter[str] = Counter()
    for el in root.iter():
        shape[el.tag.split("}")[-1]] += 1
        for attr in el.attrib:
            assert not attr.lower().startswith("on"), f"event handler attribute {attr} in the SVG"
        assert el.tag.split("}")[-1] != "script"
    return shape


@needs_dot
def test_the_trail_has_the_same_nodes_with_hostile_text() -> None:
    hostile, plain = hostile_record(big=False), plain_record()
    assert _graph_nodes(render_trail(hostile, "dot").data) == _graph_nodes(render_trail(plain, "dot").data)
    svg = render_trail(hostile, "svg").data
    assert set(_svg_shape(svg)) == set(_svg_shape(render_trail(plain, "svg").data))
    text = svg.decode("utf-8")
    assert not any(ch in text for ch in BIDI), "a bidirectional override reached the drawing"
    assert "\x1b" not in text and "\x00" not in text
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in text  # shown as written, escaped


@needs_dot
def test_a_megabyte_note_still_draws() -> None:
    drawing = render_trail(hostile_record(big=True), "svg")
    assert drawing.format == "svg"
    _svg_shape(drawing.data)  # well-formed XML, nothing active


# --------------------------------------------------------------------------- the reports


class _Shape(HTMLParser):
    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.tags: Counter[tuple[str, tuple[str, ...]]] = Counter()
        self.text: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self.tags[(tag, tuple(sorted(a for a, _ in attrs)))] += 1

    def handle_data(self, data: str) -> None:
        self.text.append(data)


def _html_shape(html: str) -> Counter[tuple[str, tuple[str, ...]]]:
    # The inline SVG differs in size with the text; compare the page around it.
    outside = re.sub(r"<svg.*?</svg>", "", html, flags=re.S)
    parser = _Shape()
    parser.feed(outside)
    return parser.tags


@needs_dot
def test_the_html_report_has_the_same_elements_with_hostile_text() -> None:
    hostile = render_report(hostile_record(big=True), "html").decode("utf-8")
    plain = render_report(plain_record(), "html").decode("utf-8")
    shape = _html_shape(hostile)
    assert shape == _html_shape(plain)
    assert not any(tag in ("script", "img", "iframe") or any(a.startswith("on") for a in attrs)
                   for tag, attrs in shape)
    assert not any(ch in hostile for ch in BIDI)
    assert "\x1b" not in hostile and "\x00" not in hostile
    assert "&lt;img src=x onerror=&quot;alert(1)&quot;&gt;" in hostile
    assert "&#x27;; DROP TABLE ohmtrail_steps; --" in hostile


@needs_dot
def test_the_pdf_report_builds_and_shows_hostile_text() -> None:
    # Found here: a cell taller than a page (a 10 KB name, a megabyte note) stopped reportlab
    # with a LayoutError; overlong text is now cut in the PDF, whole in the HTML and export.
    data = render_report(hostile_record(big=True), "pdf")
    reader = PdfReader(io.BytesIO(data))
    text = re.sub(r"\s+", " ", "\n".join(page.extract_text() for page in reader.pages))
    assert "<script>alert(1)</script>" in text
    assert "DROP TABLE ohmtrail_steps" in text
    assert "more characters; the HTML report and the JSON export hold the whole text" in text
    assert not any(ch in text for ch in BIDI)


def test_a_note_of_many_lines_does_not_stop_the_pdf() -> None:
    record = _with_text(_base(), ("x\n" * 300,), "y\n" * 300)
    reader = PdfReader(io.BytesIO(render_report(record, "pdf")))
    assert len(reader.pages) >= 1


# --------------------------------------------------------------------------- the export


def test_the_export_of_hostile_text_verifies_and_any_change_is_caught() -> None:
    record = hostile_record(big=True)
    document = json.loads(export_json(record))
    assert verify_export(document).intact
    document["session"]["technician"] = document["session"]["technician"].replace("1", "2")
    assert not verify_export(document).intact

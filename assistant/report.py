"""The claim report of a session, in HTML (self-contained) or PDF, and the demo's output folder.

The report answers "how do you know it was that part?": who tested which vehicle with which
meter and ruleset (with its content hash), every step with its time, reading, healthy range
and verdict, the diagnosis with its probability and the alternatives left, the repair and the
verification reading, the trail drawing, the cautions, and the session digest that
``ohmtrail verify`` recomputes from the JSON export. A session still open is marked "in
progress" on every page; a record whose digests do not match its contents says so at the top.

What is said lives in :func:`report_content` (plain text); this module writes it as HTML with
every user text escaped, and hands it to :mod:`assistant.report_pdf` for the PDF.
"""

from __future__ import annotations

import html
import logging
import re
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path

from assistant import __version__
from assistant import cautions as caution_texts
from assistant.display import (
    CANNOT_TELL_APART,
    clean_text,
    complaint_text,
    format_probability,
    format_range,
    format_reading,
    format_stamp,
    format_stamp_short,
    ruleset_names,
)
from assistant.errors import IntegrityError, OhmtrailError, OutputError
from assistant.export import check_record, export_json, export_session
from assistant.record import SessionRecord, Step
from assistant.report_pdf import pdf_from_content
from assistant.ruleset import load_ruleset
from assistant.trail import Drawing, render_trail

log = logging.getLogger("ohmtrail.report")

FORMATS = ("pdf", "html")

_KIND_WORDS = {"start": "complaint taken", "reading": "reading", "skip": "skipped",
               "undo": "answer taken back", "remeasure": "re-measure", "note": "note",
               "rule": "rule fired", "conclusion": "conclusion", "repair": "repair",
               "verification": "verification", "close": "closed"}


@dataclass(frozen=True)
class StepRow:
    """One step as the report tabulates it, in plain text."""

    index: str
    time: str
    what: str
    note: str
    reading: str
    expected: str
    verdict: str
    leading: str
    taken_back: bool = False


@dataclass(frozen=True)
class ReportContent:
    """Everything a claim report says, as plain (unescaped) text."""

    title: str
    in_progress: bool
    status_line: str
    integrity_problem: str | None
    facts: tuple[tuple[str, str], ...]
    diagnosis: str
    diagnosis_id: str | None  # the fault id, when the diagnosis is shown by its name
    diagnosis_probability: str
    stopped_because: str
    alternatives: tuple[tuple[str, str], ...]
    cannot_tell_apart: tuple[str, ...]  # faults no test left tells from the diagnosis
    repair: str
    verification: str
    steps: tuple[StepRow, ...]
    cautions: tuple[str, ...]
    digest: str
    step_count: int
    last_step_digest: str
    generator: str


def _name(key: str | None, names: Mapping[str, str]) -> str:
    return clean_text(names.get(key, key)) if key else ""


def _member(key: str, names: Mapping[str, str]) -> str:
    return "no fault" if key == "none" else _name(key, names)


def _diagnosis_words(record: SessionRecord, names: Mapping[str, str],
                     in_progress: bool) -> tuple[str, str | None, str]:
    """(the diagnosis, the fault id(s) when shown by name, the probability) as the report says them.

    A group the tests cannot tell apart is shown as "one of" its members with their probability
    together, never as one certain part."""
    group = tuple(record.ambiguity_group) if len(record.ambiguity_group) > 1 else ()
    if record.diagnosis and group:
        members = "; ".join(_member(f, names) for f in group)
        words = (f"No fault found beyond what the tests can resolve: one of {members}" if "none" in group
                 else f"One of: {members}")
        ids = ", ".join(clean_text(f) for f in group)
        shown = (f"together {format_probability(record.group_probability)}; "
                 if record.group_probability is not None else "")
        shown += f"most likely {_member(record.diagnosis, names)} {format_probability(record.probability)}"
        return words, ids, shown
    words = (_name(record.diagnosis, names) if record.diagnosis
             else "no diagnosis yet" if in_progress else "no fault certain enough")
    ident = (clean_text(record.diagnosis) if record.diagnosis
             and _name(record.diagnosis, names) != record.diagnosis else None)
    return words, ident, format_probability(record.probability)


def _vehicle_facts(record: SessionRecord) -> list[tuple[str, str]]:
    v = record.vehicle
    return [("Vehicle", clean_text(v.fleet_number or "") or "not given"),
            ("VIN", clean_text(v.vin or "") or "not given"),
            ("Model year", str(v.model_year) if v.model_year is not None else "not given"),
            ("Odometer", f"{v.odometer_km:,.0f} km" if v.odometer_km is not None
             else "not given")]


def _step_row(step: Step, names: Mapping[str, str], undone: set[int]) -> StepRow:
    what = _KIND_WORDS.get(step.kind, step.kind)
    if step.test_id and step.kind == "conclusion":  # the test that is to prove the repair
        what = f"{what}; verify with: {_name(step.test_id, names)}"
    elif step.test_id:
        what = f"{what}: {_name(step.test_id, names)}"
    if step.kind == "undo" and step.refers_to is not None:
        what = f"{what}: step {step.refers_to}"
    if step.rules_fired:
        what = f"{what}: {', '.join(clean_text(r) for r in step.rules_fired)}"
    leading = "\n".join(f"{_name(h, names)} {format_probability(p)}" for h, p in step.top[:2])
    return StepRow(str(step.index), format_stamp_short(step.at), what, clean_text(step.note or ""),
                   format_reading(step),
                   format_range(step.expected_low, step.expected_high, step.unit),
                   clean_text(step.verdict or ""), leading, step.index in undone)


def report_cautions(record: SessionRecord) -> tuple[str, ...]:
    """The cautions a report carries: the session's own, then the two for every page.

    A record that kept none (written before cautions were recorded) gets every caution of
    :mod:`assistant.cautions`, since which applied can no longer be told.
    """
    own = [clean_text(c).strip() for c in record.cautions]
    chosen = [*own, *caution_texts.EVERY_PAGE] if any(own) else list(caution_texts.ALL)
    return tuple(dict.fromkeys(c for c in chosen if c))


def report_content(record: SessionRecord, names: Mapping[str, str] | None = None) -> ReportContent:
    """What the claim report of a record says, ready for any renderer to escape and lay out."""
    names = names or {}
    try:
        check = check_record(record)
        integrity = export_session(record)["integrity"]
        problem = None if check.intact else check.message
    except IntegrityError as exc:  # a text that cannot be sealed (not encodable as UTF-8)
        integrity = {"digest": "unavailable", "step_count": len(record.steps),
                     "last_step_digest": "unavailable"}
        problem = str(exc)
    in_progress = record.status == "open"
    status = {"open": "IN PROGRESS: the session is still open; nothing below is final",
              "concluded": "concluded", "closed": "closed",
              "abandoned": "abandoned before a conclusion"}.get(record.status, record.status)
    facts = [("Session", clean_text(record.id)), ("Status", status),
             ("Started", format_stamp(record.started)),
             ("Finished", format_stamp(record.finished) or "not yet"),
             ("Technician", clean_text(record.technician or "") or "not given"),
             *_vehicle_facts(record),
             ("Complaint", complaint_text(record) or "not given"),
             ("Fault codes", ", ".join(clean_text(c) for c in record.fault_codes)
              or "none recorded"),
             ("Meter profile", clean_text(record.meter_profile)),
             ("Ruleset", f"{clean_text(record.ruleset_id)} version "
                         f"{clean_text(record.ruleset_version)}"),
             ("Ruleset SHA-256", clean_text(record.ruleset_sha256))]
    if record.overlays:
        facts.append(("Overlays", ", ".join(clean_text(o) for o in record.overlays)))
    undone = {s.refers_to for s in record.steps if s.kind == "undo" and s.refers_to is not None}
    verification_steps = [s for s in record.steps if s.kind == "verification"]
    # the verification step holds the reading itself; the record's text is what was said of it
    verification = clean_text(record.verification or "")
    if verification_steps:
        last = verification_steps[-1]
        healthy = format_range(last.expected_low, last.expected_high, last.unit)
        verification = (f"{_name(last.test_id, names)}: {format_reading(last)}"
                        + (f", healthy {healthy}" if healthy else "")
                        + f": {clean_text(last.verdict or 'no verdict')}"
                        f" (step {last.index}, {format_stamp(last.at)})")
    diagnosis, diagnosis_id, diagnosis_probability = _diagnosis_words(record, names, in_progress)
    return ReportContent(
        title=f"Electrical fault diagnosis report: session {clean_text(record.id)}",
        in_progress=in_progress, status_line=status,
        integrity_problem=problem,
        facts=tuple(facts),
        diagnosis=diagnosis, diagnosis_id=diagnosis_id, diagnosis_probability=diagnosis_probability,
        stopped_because=clean_text(record.stopped_because or ""),
        alternatives=tuple((_name(h, names), format_probability(p)) for h, p in record.alternatives),
        cannot_tell_apart=tuple(_member(f, names) for f in record.ambiguity_group
                                if f != record.diagnosis),
        repair=clean_text(record.repair or "") or ("not yet done" if in_progress else "none recorded"),
        verification=verification or ("not yet made" if in_progress else "none recorded"),
        steps=tuple(_step_row(s, names, undone) for s in record.steps),
        cautions=report_cautions(record),
        digest=str(integrity["digest"]), step_count=int(integrity["step_count"]),
        last_step_digest=str(integrity["last_step_digest"] or "none (no steps)"),
        generator=f"ohmtrail {__version__}")


_CSS = """
body{font-family:Helvetica,Arial,sans-serif;font-size:10pt;color:#111;margin:0 auto;max-width:180mm;padding:8mm}
h1{font-size:15pt;margin:0 0 4mm}h2{font-size:12pt;margin:6mm 0 2mm;border-bottom:1px solid #999}
table{border-collapse:collapse;width:100%}th,td{text-align:left;vertical-align:top;padding:1.2mm 1.6mm}
table.facts th{width:34%;font-weight:normal;color:#444}table.steps th{background:#eee;font-size:9pt}
table.steps td{border-top:1px solid #ddd;font-size:9pt}tr.taken-back td{color:#777;text-decoration:line-through}
.banner{border:2px solid #b45309;background:#fff4e5;padding:2mm 3mm;margin:0 0 4mm;font-weight:bold}
.bad{border-color:#b91c1c;background:#fdecec}.diagnosis{font-size:12pt;font-weight:bold}
.note{font-style:italic;color:#333}.digest{font-family:monospace;word-break:break-all}
.trail svg{max-width:100%;height:auto}pre{white-space:pre-wrap;font-size:8pt}
@page{size:A4;margin:15mm}@media print{body{padding:0}h2{break-after:avoid}tr{break-inside:avoid}}
""".strip()


def _e(text: str) -> str:
    return html.escape(text, quote=True).replace("\n", "<br>")


def _inline_svg(drawing: Drawing) -> str:
    if drawing.format != "svg":
        return (f"<p>{_e(drawing.hint or 'The drawing is not available.')}</p>"
                f"<pre>{_e(drawing.data.decode('utf-8'))}</pre>")
    svg = drawing.data.decode("utf-8")
    start = svg.find("<svg")
    return re.sub(r"<!--.*?-->", "", svg[start:], flags=re.S) if start >= 0 else ""


def report_html(record: SessionRecord, names: Mapping[str, str] | None = None) -> str:
    """The claim report as one self-contained HTML page (inline CSS and SVG, no links out)."""
    c = report_content(record, names)
    parts = ["<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">',
             f"<title>{_e(c.title)}</title><style>{_CSS}</style></head><body>",
             f"<h1>{_e(c.title)}</h1>"]
    if c.in_progress:
        parts.append(f'<p class="banner">{_e(c.status_line)}</p>')
    if c.integrity_problem:
        parts.append(f'<p class="banner bad">Integrity check failed: {_e(c.integrity_problem)}</p>')
    parts.append('<h2>Session</h2><table class="facts">')
    parts += [f"<tr><th>{_e(k)}</th><td>{_e(v)}</td></tr>" for k, v in c.facts]
    parts.append("</table><h2>Diagnosis</h2>")
    prob = f" ({_e(c.diagnosis_probability)})" if c.diagnosis_probability else ""
    parts.append(f'<p class="diagnosis">{_e(c.diagnosis)}{prob}</p>')
    if c.diagnosis_id:
        label = "Fault ids" if ", " in c.diagnosis_id else "Fault id"
        parts.append(f"<p>{label}: <code>{_e(c.diagnosis_id)}</code></p>")
    if c.stopped_because:
        parts.append(f"<p>Stopped because: {_e(c.stopped_because)}</p>")
    if c.alternatives:
        parts.append('<p>Alternatives left:</p><table class="facts">')
        parts += [f"<tr><th>{_e(h)}</th><td>{_e(p)}</td></tr>" for h, p in c.alternatives]
        parts.append("</table>")
    if c.cannot_tell_apart:
        parts.append(f"<p>{CANNOT_TELL_APART}: "
                     f"{_e('; '.join(c.cannot_tell_apart))}.</p>")
    parts.append(f"<h2>Repair</h2><p>{_e(c.repair)}</p>")
    parts.append(f"<h2>Verification</h2><p>{_e(c.verification)}</p>")
    parts.append('<h2>Steps</h2><table class="steps"><tr><th>#</th><th>time (UTC)</th><th>step</th>'
                 "<th>reading</th><th>healthy</th><th>verdict</th><th>leading after</th></tr>")
    for row in c.steps:
        note = f'<br><span class="note">{_e(row.note)}</span>' if row.note else ""
        cls = ' class="taken-back"' if row.taken_back else ""
        parts.append(f"<tr{cls}><td>{_e(row.index)}</td><td>{_e(row.time)}</td>"
                     f"<td>{_e(row.what)}{note}</td><td>{_e(row.reading)}</td>"
                     f"<td>{_e(row.expected)}</td><td>{_e(row.verdict)}</td>"
                     f"<td>{_e(row.leading)}</td></tr>")
    parts.append("</table><h2>Decision trail</h2>")
    parts.append(f'<div class="trail">{_inline_svg(render_trail(record, "svg", names))}</div>')
    parts.append("<h2>Cautions</h2><ul>")
    parts += [f"<li>{_e(text)}</li>" for text in c.cautions]
    parts.append("</ul><h2>Integrity</h2>")
    parts.append(f'<p>Session digest (SHA-256): <span class="digest">{_e(c.digest)}</span></p>'
                 f"<p>{c.step_count} steps, each chained to the one before; last step digest "
                 f'<span class="digest">{_e(c.last_step_digest)}</span>.</p>'
                 "<p>Check an exported copy with <code>ohmtrail verify FILE</code>: it must say "
                 "intact and show this digest.</p>")
    parts.append(f"<p><small>Written by {_e(c.generator)}.</small></p></body></html>")
    return "\n".join(parts) + "\n"


def report_pdf(record: SessionRecord, names: Mapping[str, str] | None = None) -> bytes:
    """The claim report as PDF bytes (A4), the trail drawing included when graphviz can draw it."""
    drawing = render_trail(record, "png", names)
    return pdf_from_content(report_content(record, names),
                            drawing.data if drawing.format == "png" else None,
                            drawing.hint, drawing.node_spans)


def render_report(record: SessionRecord, fmt: str = "pdf",
                  names: Mapping[str, str] | None = None) -> bytes:
    """The claim report as PDF or HTML bytes."""
    if fmt == "html":
        return report_html(record, names).encode("utf-8")
    if fmt == "pdf":
        return report_pdf(record, names)
    raise OutputError(f"unknown report format {fmt!r}: use one of {', '.join(FORMATS)}")


def write_output(path: Path, data: bytes) -> Path:
    """Write bytes to a file; an unwritable path is an OutputError naming it."""
    try:
        path.write_bytes(data)
    except OSError as exc:
        raise OutputError(f"{path}: cannot write: {exc.strerror or exc}") from exc
    log.info("wrote %s (%d bytes)", path, len(data))
    return path


def output_stem(session_id: str) -> str:
    """A file-name stem made from a session id (anything but letters, digits, . _ - becomes _)."""
    return re.sub(r"[^A-Za-z0-9_.-]+", "_", session_id).strip("._") or "session"


def session_names(record: SessionRecord) -> dict[str, str]:
    """Test titles and fault names from the ruleset file the session used, if it is unchanged.

    Empty (so that ids are shown) when the record names no file, the file cannot be loaded,
    or its SHA-256 differs from the one recorded: names from another version could mislead.
    """
    path = record.ruleset_path
    if not path:
        return {}
    try:
        loaded = load_ruleset(path)
    except OhmtrailError as exc:
        log.info("ruleset %s not loaded for names (%s); ids shown", path, exc)
        return {}
    if loaded.sha256 != record.ruleset_sha256:
        log.warning("%s has changed since session %s was recorded; test and fault ids shown",
                    path, record.id)
        return {}
    return ruleset_names(loaded.ruleset)


def write_outputs(record: SessionRecord, folder: Path,
                  names: Mapping[str, str] | None = None) -> list[Path]:
    """Write a session's trail (SVG), report (PDF and HTML) and JSON export into ``folder``.

    Returns the paths written. Without graphviz's ``dot`` the trail is written as DOT source.
    ``names`` defaults to :func:`session_names` of the record.
    """
    if names is None:
        names = session_names(record)
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OutputError(f"{folder}: cannot create the folder: {exc.strerror or exc}") from exc
    stem = output_stem(record.id)
    drawing = render_trail(record, "svg", names)
    if drawing.hint:
        log.warning("%s", drawing.hint)
    export = export_json(record)
    return [write_output(folder / f"{stem}-trail.{drawing.format}", drawing.data),
            write_output(folder / f"{stem}-report.pdf", render_report(record, "pdf", names)),
            write_output(folder / f"{stem}-report.html", render_report(record, "html", names)),
            write_output(folder / f"{stem}-export.json", export.encode("utf-8"))]

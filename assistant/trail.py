"""The decision trail as a graphviz drawing: the path a session took, step by step.

One column, top to bottom, so that it reads at A4 width however long the session ran: the
complaint, then each test as a box with the reading against its healthy range and the leading
suspects after it, skipped tests dashed, answers taken back struck through, re-measured tests
linked back to the reading they repeat, then the conclusion, the repair and the verification
reading. Notes and fired rules sit beside the step they follow.

Every text that came from a person or a record (notes, names, ids, readings) goes into a
graphviz HTML-like label through :func:`html_text`, which escapes it, so that no note can end a
label, open a tag or add a node. Node names are ours (``s0``, ``s1``, ...), never user text.
"""

from __future__ import annotations

import html
import json
import logging
import textwrap
from collections.abc import Iterable, Mapping
from dataclasses import dataclass

import graphviz

from assistant.display import (
    clean_text,
    complaint_text,
    format_clock,
    format_probability,
    format_range,
    format_reading,
)
from assistant.errors import OutputError
from assistant.record import SessionRecord, Step

log = logging.getLogger("ohmtrail.trail")

FORMATS = ("svg", "pdf", "png", "dot")
INSTALL_HINT = ("graphviz's `dot` program was not found, so the DOT source is given instead: "
                "install graphviz (Debian: apt-get install graphviz, or `make tools`) to draw it")

MAIN_WIDTH = 52  # characters per line in a step box: about 3.9 in at 10 pt
SIDE_WIDTH = 28  # characters per line in a note beside a step: about 1.8 in at 9 pt
_FONT = "Helvetica"
_FILL = {"in range": "#e8f3e8", "start": "#eef2f7", "conclusion": "#eef2f7",
         "repair": "#f4f0e6", "verification": "#e8f3e8"}
_OUT_OF_RANGE_FILL = "#fbe6d4"
_GOOD_VERDICTS = ("in range", "as expected")
_GREY = "#777777"
PNG_DPI = 150  # resolution of the png drawing, also the one the PDF report embeds


def html_text(text: str | None, width: int = MAIN_WIDTH) -> str:
    """Text made safe for a graphviz HTML-like label, wrapped to ``width`` characters per line.

    Control characters go, ``& < > " '`` become entities and each line break becomes a
    left-aligned ``<BR/>``; braces, backslashes and quotes then mean nothing to graphviz.
    """
    if not text:
        return ""
    lines: list[str] = []
    for paragraph in clean_text(text).split("\n"):
        lines.extend(textwrap.wrap(paragraph, width=width, break_long_words=True,
                                   break_on_hyphens=False) or [""])
    if not any(lines):
        return "&#160;"  # graphviz refuses an empty <FONT> or <I> element
    return '<BR ALIGN="LEFT"/>'.join(html.escape(line, quote=True) for line in lines)


def _nbsp(text: str) -> str:
    # keeps "98.1 %" on one line when a label wraps
    return text.replace(" ", "\xa0")


def _name(key: str, names: Mapping[str, str]) -> str:
    return names.get(key, key)


def _cell(content: str, *, colspan: int = 1, bgcolor: str | None = None) -> str:
    fill = f' BGCOLOR="{bgcolor}"' if bgcolor else ""
    return (f'<TD ALIGN="LEFT" BALIGN="LEFT" COLSPAN="{colspan}"{fill}>'
            f"{content or ' '}</TD>")


def _table(rows: Iterable[str], *, fill: str = "white", color: str = "#333333",
           dashed: bool = False) -> str:
    style = ' STYLE="dashed"' if dashed else ' STYLE="rounded"'
    body = "".join(f"<TR>{row}</TR>" for row in rows)
    return (f'<<TABLE BORDER="1" CELLBORDER="0" CELLSPACING="0" CELLPADDING="4"'
            f' BGCOLOR="{fill}" COLOR="{color}"{style}>{body}</TABLE>>')


def _head(step: Step, title: str, *, grey: bool = False) -> str:
    colour = _GREY if grey else "#000000"
    text = (f'<FONT COLOR="{colour}"><B>{step.index}</B>  {html.escape(format_clock(step.at))}'
            f"  <B>{title}</B></FONT>")
    return _cell(text, colspan=3)


def _suspects(top: tuple[tuple[str, float], ...], names: Mapping[str, str]) -> str:
    if not top:
        return ""
    parts = [f"{_name(h, names)}\xa0{_nbsp(format_probability(p))}" for h, p in top[:3]]
    return ('<FONT POINT-SIZE="9">leading: '
            + html_text("\n".join(parts), MAIN_WIDTH - 9) + "</FONT>")


def _reading_rows(step: Step, names: Mapping[str, str], *, struck: bool) -> list[str]:
    read = html_text(format_reading(step) or "-", 20)
    expected = html_text(format_range(step.expected_low, step.expected_high, step.unit), 22)
    verdict = html_text(step.verdict or "", 14)
    if struck:
        read, verdict = f"<S>{read}</S>", f"<S>{verdict}</S>"
    verdict_fill = None if struck else (_FILL["in range"] if step.verdict in _GOOD_VERDICTS
                                        else _OUT_OF_RANGE_FILL if step.verdict else None)
    rows = [_cell(f"read <B>{read}</B>") + _cell(f"healthy {expected}" if expected else "")
            + _cell(f"<B>{verdict}</B>" if verdict else "", bgcolor=verdict_fill)]
    if step.top and not struck:
        rows.append(_cell(_suspects(step.top, names), colspan=3))
    if step.rules_fired:
        rules = ", ".join(step.rules_fired)
        rows.append(_cell('<FONT POINT-SIZE="9">rules: ' + html_text(rules, MAIN_WIDTH - 7)
                          + "</FONT>", colspan=3))
    if step.note:
        rows.append(_cell("<I>" + html_text(step.note) + "</I>", colspan=3))
    return rows


def _complaint_label(record: SessionRecord, start: Step | None,
                     names: Mapping[str, str]) -> str:
    vehicle = record.vehicle
    bits = [b for b in (vehicle.fleet_number, vehicle.vin,
                        f"{vehicle.odometer_km:,.0f} km" if vehicle.odometer_km is not None
                        else None, str(vehicle.model_year) if vehicle.model_year else None) if b]
    rows = [_cell("<B>Complaint</B>" + (f"  {html.escape(format_clock(start.at))}"
                                        if start else ""), colspan=3),
            _cell(html_text(complaint_text(record) or "(none given)"), colspan=3)]
    if bits:
        rows.append(_cell('<FONT POINT-SIZE="9">vehicle: ' + html_text(" · ".join(bits))
                          + "</FONT>", colspan=3))
    if record.fault_codes:
        rows.append(_cell('<FONT POINT-SIZE="9">fault codes: '
                          + html_text(", ".join(record.fault_codes)) + "</FONT>", colspan=3))
    if start is not None and start.top:
        rows.append(_cell(_suspects(start.top, names), colspan=3))
    return _table(rows, fill=_FILL["start"])


def _side_label(step: Step) -> str:
    if step.kind == "rule":
        title = "rule fired: " + ", ".join(step.rules_fired) if step.rules_fired else "rule fired"
    else:
        title = "note"
    rows = [f'<TR><TD ALIGN="LEFT" BALIGN="LEFT"><FONT POINT-SIZE="9"><B>{step.index}</B>  '
            f"{html.escape(format_clock(step.at))}  {html_text(title, SIDE_WIDTH)}</FONT></TD></TR>"]
    if step.note:
        rows.append(f'<TR><TD ALIGN="LEFT" BALIGN="LEFT"><FONT POINT-SIZE="9">'
                    f"{html_text(step.note, SIDE_WIDTH)}</FONT></TD></TR>")
    return ('<<TABLE BORDER="1" CELLBORDER="0" CELLSPACING="0" CELLPADDING="3" '
            'BGCOLOR="#fffbe8" COLOR="#999999">' + "".join(rows) + "</TABLE>>")


def _spine_label(step: Step, record: SessionRecord, names: Mapping[str, str],
                 undone: set[int]) -> str:
    test = html_text(_name(step.test_id, names), MAIN_WIDTH - 14) if step.test_id else ""
    struck = step.index in undone
    if step.kind == "reading":
        title = f"<S>{test}</S>  (taken back)" if struck else test
        return _table([_head(step, title, grey=struck)]
                      + _reading_rows(step, names, struck=struck),
                      color=_GREY if struck else "#333333")
    if step.kind == "verification":
        return _table([_head(step, "Verification: " + test)]
                      + _reading_rows(step, names, struck=False), fill=_FILL["verification"])
    if step.kind == "skip":
        rows = [_head(step, "skipped: " + test, grey=True)]
        if step.note:
            rows.append(_cell("<I>" + html_text(step.note) + "</I>", colspan=3))
        return _table(rows, color=_GREY, dashed=True)
    if step.kind == "remeasure":
        rows = [_head(step, "re-measure: " + test)]
        if step.note:
            rows.append(_cell("<I>" + html_text(step.note) + "</I>", colspan=3))
        return _table(rows, dashed=True)
    if step.kind == "undo":
        what = f"step {step.refers_to}" if step.refers_to is not None else "the last answer"
        rows = [_head(step, f"taken back: {what}", grey=True)]
        if step.note:
            rows.append(_cell("<I>" + html_text(step.note) + "</I>", colspan=3))
        return _table(rows, color=_GREY, dashed=True)
    if step.kind == "conclusion":
        return _table(_conclusion_rows(step, record, names), fill=_FILL["conclusion"])
    if step.kind == "repair":
        rows = [_head(step, "Repair"),
                _cell(html_text(step.note or record.repair or "(not described)"), colspan=3)]
        return _table(rows, fill=_FILL["repair"])
    if step.kind == "close":
        return _table([_head(step, "session closed")], color=_GREY)
    rows = [_head(step, html_text(step.kind))]  # "start" past the first, or a kind added later
    if step.note:
        rows.append(_cell(html_text(step.note), colspan=3))
    return _table(rows)


def _conclusion_rows(step: Step, record: SessionRecord, names: Mapping[str, str]) -> list[str]:
    ranking = step.top or (((record.diagnosis, record.probability or 0.0),)
                           if record.diagnosis else ())
    best = ranking[0] if ranking else None
    group = tuple(record.ambiguity_group) if len(record.ambiguity_group) > 1 else ()
    if record.diagnosis is not None and group:
        # a group the tests cannot tell apart: "one of", never a single certain part
        members = ", ".join("no fault" if f == "none" else _name(f, names) for f in group)
        together = (f" together {_nbsp(format_probability(record.group_probability))}"
                    if record.group_probability is not None else "")
        lead = ("<B>no fault found beyond what the tests can resolve</B>: one of "
                if "none" in group else "<B>one of:</B> ")
        verdict = (lead + html_text(members) + together + "; most likely "
                   + html_text("no fault" if record.diagnosis == "none" else _name(record.diagnosis, names))
                   + f"\xa0{_nbsp(format_probability(record.probability))}")
    elif record.diagnosis is not None:
        verdict = (f"<B>{html_text(_name(record.diagnosis, names))}</B>  "
                   f"{format_probability(record.probability)}")
    elif best is not None:
        verdict = (f"<B>no fault certain enough</B>; most likely "
                   f"{html_text(_name(best[0], names))}\xa0{_nbsp(format_probability(best[1]))}")
    else:
        verdict = "<B>no diagnosis certain enough</B>"
    rows = [_head(step, "Conclusion"), _cell(verdict, colspan=3)]
    why = step.note or record.stopped_because
    if why:
        rows.append(_cell('<FONT POINT-SIZE="9">stopped: ' + html_text(why, MAIN_WIDTH - 9)
                          + "</FONT>", colspan=3))
    if step.test_id:
        rows.append(_cell('<FONT POINT-SIZE="9">verify with: '
                          + html_text(_name(step.test_id, names), MAIN_WIDTH - 13) + "</FONT>",
                          colspan=3))
    others = record.alternatives or (ranking[1:] if ranking else ())
    if others:
        parts = "\n".join(f"{_name(h, names)}\xa0{_nbsp(format_probability(p))}"
                           for h, p in others[:3])
        rows.append(_cell('<FONT POINT-SIZE="9">alternatives: ' + html_text(parts, MAIN_WIDTH - 14)
                          + "</FONT>", colspan=3))
    return rows


def _title(record: SessionRecord) -> str:
    text = (f"Decision trail · session {record.id} · ruleset {record.ruleset_id} "
            f"{record.ruleset_version}")
    if record.status == "open":
        text += " · IN PROGRESS"
    return "<" + html_text(text, 64) + ">"


def trail_graph(record: SessionRecord, names: Mapping[str, str] | None = None) -> graphviz.Digraph:
    """The trail of a session as a graphviz digraph (nothing is rendered yet).

    ``names`` maps test and fault ids to the titles to show; ids without one show as they are.
    """
    names = names or {}
    graph = graphviz.Digraph("trail", graph_attr={
        "rankdir": "TB", "label": _title(record), "labelloc": "t", "labeljust": "l",
        "fontname": _FONT, "fontsize": "12", "nodesep": "0.25", "ranksep": "0.22",
        "size": "6.9,1000", "margin": "0.1", "newrank": "true",
    }, node_attr={"shape": "plain", "fontname": _FONT, "fontsize": "10"},
        edge_attr={"color": "#555555", "arrowsize": "0.6"})

    steps = list(record.steps)
    start = steps[0] if steps and steps[0].kind == "start" else None
    undone = {s.refers_to for s in steps if s.kind == "undo" and s.refers_to is not None}
    graph.node("complaint", _complaint_label(record, start, names))
    spine_prev = "complaint"
    last_reading: dict[str, str] = {}
    side_prev: str | None = None  # the last note or rule drawn beside the current step
    for step in steps:
        if step is start:
            continue
        name = f"s{step.index}"
        if step.kind in ("note", "rule"):
            graph.node(name, _side_label(step))
            if side_prev is None:  # the first beside its step, level with it
                graph.edge(spine_prev, name, style="dashed", arrowhead="none", color="#999999")
                with graph.subgraph() as same:
                    same.attr(rank="same")
                    same.node(spine_prev)
                    same.node(name)
            else:  # further ones stacked under it, so the drawing keeps two columns
                graph.edge(side_prev, name, style="dashed", arrowhead="none", color="#999999")
            side_prev = name
            continue
        side_prev = None
        graph.node(name, _spine_label(step, record, names, undone))
        graph.edge(spine_prev, name)
        if step.kind == "undo" and step.refers_to is not None and any(
                s.index == step.refers_to for s in steps):
            graph.edge(f"{name}:e", f"s{step.refers_to}:e", style="dashed",
                       constraint="false", color=_GREY, arrowsize="0.5")
        if step.kind == "remeasure" and step.test_id in last_reading:
            graph.edge(f"{name}:e", f"{last_reading[step.test_id]}:e", style="dotted",
                       constraint="false", color=_GREY, arrowsize="0.5")
        if step.kind in ("reading", "verification") and step.test_id \
                and step.index not in undone:
            last_reading[step.test_id] = name
        spine_prev = name
    ending = {"open": "<B>in progress</B>: the session is still open",
              "abandoned": "<B>abandoned</B> before a conclusion"}.get(record.status)
    if ending:
        graph.node("end", _table([_cell(ending, colspan=3)], color=_GREY, dashed=True))
        graph.edge(spine_prev, "end", style="dashed")
    return graph


def dot_source(record: SessionRecord, names: Mapping[str, str] | None = None) -> str:
    """The DOT source of a session's trail."""
    return str(trail_graph(record, names).source)


@dataclass(frozen=True)
class Drawing:
    """A rendered trail: its bytes and format; ``hint`` says why it is DOT when another was asked."""

    data: bytes
    format: str
    hint: str | None = None
    # For png: where each node lies, top and bottom as fractions of the picture's height, so
    # that a long picture can be cut between nodes.
    node_spans: tuple[tuple[float, float], ...] = ()


def render_trail(record: SessionRecord, fmt: str = "svg",
                 names: Mapping[str, str] | None = None) -> Drawing:
    """The trail drawn as svg, pdf or png (or its DOT source for ``"dot"``).

    Without graphviz's ``dot`` program the DOT source comes back with :data:`INSTALL_HINT`.
    """
    if fmt not in FORMATS:
        raise OutputError(f"unknown drawing format {fmt!r}: use one of {', '.join(FORMATS)}")
    graph = trail_graph(record, names)
    source = str(graph.source).encode("utf-8")
    if fmt == "dot":
        return Drawing(source, "dot")
    if fmt == "png":
        graph.graph_attr["dpi"] = str(PNG_DPI)
    try:
        data = graph.pipe(format=fmt)
    except graphviz.ExecutableNotFound:
        log.warning("dot not found; giving the DOT source")
        return Drawing(source, "dot", INSTALL_HINT)
    except graphviz.CalledProcessError as exc:
        raise OutputError(f"graphviz could not draw the trail: "
                          f"{(exc.stderr or b'').decode('utf-8', 'replace').strip()}") from exc
    spans = _node_spans(graph) if fmt == "png" else ()
    return Drawing(bytes(data), fmt, node_spans=spans)


def _node_spans(graph: graphviz.Digraph) -> tuple[tuple[float, float], ...]:
    layout = json.loads(graph.pipe(format="json"))
    _, y0, _, y1 = (float(v) for v in layout["bb"].split(","))
    # the picture holds the layout's bounding box, then the margin and graphviz's pad
    # (0.0555 in, 4 pt, by default) on each side
    margin = (float(graph.graph_attr.get("margin", "0"))
              + float(graph.graph_attr.get("pad", "0.0555"))) * 72.0
    total = (y1 - y0) + 2 * margin
    spans = []
    for obj in layout.get("objects", []):
        if "pos" in obj and "height" in obj:
            y = float(obj["pos"].split(",")[1])
            half = float(obj["height"]) * 72.0 / 2
            spans.append(((margin + y1 - y - half) / total, (margin + y1 - y + half) / total))
    return tuple(sorted(spans))

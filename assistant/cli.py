"""The ``ohmtrail`` command line: parses arguments, calls the library, prints.

Every mistake of the user's ends as one line on stderr (``FILE:LINE:COL: message`` where
there is a place) and a non-zero exit status; never a traceback.
"""

from __future__ import annotations

import argparse
import json
import logging
import sys
from collections.abc import Callable, Sequence
from pathlib import Path

from assistant import __version__
from assistant.errors import LocatedError, OhmtrailError, OutputError
from assistant.history import HEADER as HISTORY_HEADER
from assistant.history import Repair, default_ruleset_roots, known_ruleset_ids, read_history, repairs_from_store
from assistant.learn import learn
from assistant.netgraph import FORMATS as GRAPH_FORMATS
from assistant.netgraph import circuit_graph, render_graph
from assistant.overlay import beside_path, overlay_document
from assistant.scaffold import FAMILIES, write_scaffold
from assistant.ruleset import LoadedRuleset, lint_paths, load_ruleset
from assistant.ruleset.lint import summary
from assistant.ruleset.model import Ruleset

log = logging.getLogger("ohmtrail.cli")

Handler = Callable[[argparse.Namespace], int]


# --------------------------------------------------------------------------- shared options


def add_overlay_options(p: argparse.ArgumentParser) -> None:
    """Give a command that loads a RULESET the priors-overlay options (``--overlay``, ``--no-overlay``)."""
    p.add_argument("--overlay", action="append", default=[], metavar="FILE",
                   help="apply this priors overlay after the ruleset's own NAME.overlay.yaml (repeatable; "
                   "later ones win)")
    p.add_argument("--no-overlay", action="store_true",
                   help="ignore the NAME.overlay.yaml beside the ruleset")


def load_with_overlays(args: argparse.Namespace, attr: str = "ruleset") -> LoadedRuleset:
    """Load the ruleset named by ``args.<attr>`` with the overlays the options ask for."""
    return load_ruleset(getattr(args, attr), getattr(args, "overlay", ()) or (),
                        beside=not getattr(args, "no_overlay", False))


def _positive_float(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"'{text}' is not a number") from None
    if not value > 0 or value == float("inf"):
        raise argparse.ArgumentTypeError(f"'{text}' must be a positive number")
    return value


# --------------------------------------------------------------------------- commands



def _cmd_lint(args: argparse.Namespace) -> int:
    result = lint_paths(args.paths)
    for problem in result.problems:
        print(problem, file=sys.stderr)
    print(summary(result), file=sys.stderr if result.problems else sys.stdout)
    return 1 if result.problems or result.files == 0 else 0


def _cmd_schema(args: argparse.Namespace) -> int:
    schema = Ruleset.model_json_schema()
    schema["$schema"] = "https://json-schema.org/draft/2020-12/schema"
    schema["title"] = "ohmtrail ruleset, format 1"
    print(json.dumps(schema, indent=2, sort_keys=False))
    return 0


def _cmd_learn(args: argparse.Namespace) -> int:
    loaded = load_ruleset(args.ruleset, beside=False)  # learn from the author's weights, not an old overlay
    out = Path(args.output) if args.output else beside_path(args.ruleset)
    if out.resolve() == Path(args.ruleset).resolve():
        raise OutputError(f"{out}: that is the ruleset itself; an overlay is written beside it, never over it")
    if out.suffix not in (".yaml", ".yml"):
        raise OutputError(f"{out}: an overlay file name must end in .yaml")
    repairs: list[Repair] = []
    if args.history:
        roots = args.rulesets or default_ruleset_roots(args.ruleset)
        known = known_ruleset_ids(roots) | {loaded.ruleset.id}
        repairs.extend(read_history(args.history, known))
    if args.sessions or args.db:
        repairs.extend(repairs_from_store(args.db))
    if not args.history and not (args.sessions or args.db):
        raise OhmtrailError("learn needs --history FILE, or --sessions / --db URL for the store's closed sessions")
    result = learn(loaded.ruleset, repairs, args.strength)
    for item in result.uncounted:
        print(f"not counted: {item.source}: {item.fault_id} ({item.reason})")
    if result.repairs == 0:
        raise OhmtrailError(f"no repairs of ruleset '{loaded.ruleset.id}' to learn from; no overlay written")
    rs = loaded.ruleset
    total = rs.none_weight + sum(result.old.values())
    print(f"{rs.id}: {result.repairs} repairs counted, prior strength {result.strength:g} pseudo-repairs")
    print(f"{'fault':<34} {'repairs':>7} {'old weight':>10} {'new weight':>10} {'old prior':>9} {'new prior':>9}")
    changed = result.changed()
    for fault_id in changed:
        old, new = result.old[fault_id], result.new[fault_id]
        print(f"{fault_id:<34} {result.counts.get(fault_id, 0):>7} {old:>10.4g} {new:>10.4g} "
              f"{old / total:>9.1%} {new / total:>9.1%}")
    note = (f"learned by ohmtrail learn from {result.repairs} repairs"
            f"{' in ' + Path(args.history).name if args.history else ''}, strength {result.strength:g}")
    text = overlay_document(rs, result.new, ruleset_sha256=loaded.sha256, note=note)
    try:
        out.write_text(text, encoding="utf-8")
    except OSError as exc:
        raise OutputError(f"{out}: cannot write: {exc.strerror or exc}") from exc
    print(f"{len(changed)} weights changed; overlay written to {out}")
    return 0


def _cmd_new(args: argparse.Namespace) -> int:
    target = write_scaffold(args.family, args.name, args.output)
    print(f"wrote {target}: a {args.family} ruleset to adapt; then `ohmtrail lint {target}` and "
          f"`ohmtrail check {target}`")
    return 0


def _cmd_graph(args: argparse.Namespace) -> int:
    loaded = load_with_overlays(args)
    graph = circuit_graph(loaded.ruleset, args.state)
    out = args.output or f"{Path(args.ruleset).stem}{'-' + args.state if args.state else ''}.{args.format}"
    drawing = render_graph(graph, args.format, out)
    if drawing.hint:
        print(drawing.hint, file=sys.stderr)
    else:
        print(f"wrote {drawing.path}")
    return 0


def build_parser() -> argparse.ArgumentParser:
    """The argument parser with every subcommand."""
    parser = argparse.ArgumentParser(
        prog="ohmtrail",
        description="Troubleshooting assistant for vehicle electrical faults: finds the broken, "
        "shorted or corroded part with the fewest meter minutes, and keeps the proof.",
    )
    parser.add_argument("--version", action="version", version=f"ohmtrail {__version__}")
    parser.add_argument("-v", "--verbose", action="store_true", help="log what is done to stderr")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")

    p = sub.add_parser("lint", help="check ruleset files or folders for errors",
                       description="Check ruleset files (or every *.yaml under folders): schema and "
                       "semantic checks. Prints FILE:LINE:COL: message per problem; exit 1 if any.")
    p.add_argument("paths", nargs="+", metavar="PATH")
    p.set_defaults(handler=_cmd_lint)

    p = sub.add_parser("schema", help="print the JSON Schema of the ruleset format",
                       description="Print the JSON Schema of ruleset format 1, for editor completion.")
    p.set_defaults(handler=_cmd_schema)

    p = sub.add_parser("learn", help="tune a ruleset's fault weights from the fleet's repair history",
                       description="Count confirmed repairs (a history CSV, and/or the store's closed "
                       "sessions) and write a priors overlay: the ruleset's fault weights updated by "
                       "Dirichlet (additive) smoothing. Prints the old and new weight of every fault that "
                       "changed. The ruleset file is never rewritten. CSV header: " + HISTORY_HEADER)
    p.add_argument("ruleset", metavar="RULESET")
    p.add_argument("--history", metavar="FILE", help="repair-history CSV file")
    p.add_argument("--sessions", action="store_true", help="also count the closed sessions of the store")
    p.add_argument("--db", metavar="URL", help="the session store to read (implies --sessions)")
    p.add_argument("-o", "--output", metavar="OVERLAY",
                   help="overlay file to write (default: NAME.overlay.yaml beside the ruleset, applied "
                   "automatically from then on)")
    p.add_argument("--strength", type=_positive_float, default=None, metavar="N",
                   help="weight of the ruleset's own priors, in pseudo-repairs (default: the number of faults)")
    p.add_argument("--rulesets", action="append", metavar="PATH",
                   help="rulesets whose ids the history may also name (rows for them are skipped); default: "
                   "the rulesets/ folder the ruleset is in")
    p.set_defaults(handler=_cmd_learn)

    p = sub.add_parser("new", help="write a commented starting ruleset for a circuit family",
                       description="Write NAME.yaml: a commented starting ruleset for the family that "
                       "lints clean and has one case, for the author to adapt. Never overwrites a file.")
    p.add_argument("family", metavar="FAMILY", choices=FAMILIES, help=", ".join(FAMILIES))
    p.add_argument("name", metavar="NAME", help="the new ruleset's id (and file name)")
    p.add_argument("-o", "--output", metavar="FILE", help="where to write it (default: NAME.yaml)")
    p.set_defaults(handler=_cmd_new)

    p = sub.add_parser("graph", help="draw a ruleset's circuit as modelled",
                       description="Draw the circuit of a ruleset with Graphviz: test points (nodes) with "
                       "their tests, components with their values, and which states close each switch. "
                       "Without the 'dot' program the DOT source is written instead, with a hint.")
    p.add_argument("ruleset", metavar="RULESET")
    p.add_argument("--format", choices=GRAPH_FORMATS, default="svg", help="output format (default svg)")
    p.add_argument("-o", "--output", metavar="FILE", help="where to write it (default: NAME.FORMAT here)")
    p.add_argument("--state", metavar="S", help="draw the contacts as this operating state sets them")
    add_overlay_options(p)
    p.set_defaults(handler=_cmd_graph)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; returns the exit status."""
    parser = build_parser()
    args = parser.parse_args(argv)
    logging.basicConfig(level=logging.INFO if args.verbose else logging.WARNING,
                        format="%(name)s: %(message)s")
    handler: Handler | None = getattr(args, "handler", None)
    if handler is None:
        parser.print_help()
        return 2
    try:
        return handler(args)
    except LocatedError as exc:
        print(f"ohmtrail: {exc}" if not exc.file else str(exc), file=sys.stderr)
        return 1
    except OhmtrailError as exc:
        print(f"ohmtrail: {exc}", file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        print("ohmtrail: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return 0


if __name__ == "__main__":
    sys.exit(main())

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
from assistant.export import export_json, read_export, verify_export
from assistant.record import SessionRecord
from assistant.report import output_stem, render_report, session_names, write_output
from assistant.ruleset import lint_paths
from assistant.ruleset.lint import check_ruleset, summary
from assistant.ruleset.load import LoadedRuleset, load_ruleset
from assistant.ruleset.model import Ruleset
from assistant.trail import render_trail

log = logging.getLogger("ohmtrail.cli")

Handler = Callable[[argparse.Namespace], int]


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


def _load_checked(path: str) -> LoadedRuleset:
    return check_ruleset(load_ruleset(path))


def _cmd_predict(args: argparse.Namespace) -> int:
    from assistant.meter import load_meter_profile
    from assistant.predict import predict, prediction_json, prediction_text

    loaded = _load_checked(args.ruleset)
    meter = load_meter_profile(args.meter) if args.meter else None
    table = predict(loaded, meter, samples=args.samples, seed=args.seed, cache=not args.no_cache)
    if args.json:
        print(json.dumps(prediction_json(table, args.fault), indent=2))
    else:
        print(prediction_text(table, args.fault))
    return 0


def _cmd_spice(args: argparse.Namespace) -> int:
    from assistant.spice import spice_deck

    loaded = _load_checked(args.ruleset)
    deck = spice_deck(loaded.ruleset, (args.fault or "none",), args.state)
    if args.output:
        try:
            with open(args.output, "w", encoding="utf-8") as fh:
                fh.write(deck.text)
        except OSError as exc:
            raise OutputError(f"{args.output}: cannot be written: {exc.strerror or exc}") from exc
        print(f"wrote {args.output}: state '{deck.state}', {args.fault or 'no fault'}; run: ngspice -b {args.output}")
    else:
        sys.stdout.write(deck.text)
    return 0


def _load_session(args: argparse.Namespace) -> SessionRecord:
    from assistant.store import open_store

    return open_store(args.db).load(args.session_id)


def _emit(data: bytes, output: str | None, default_name: str) -> None:
    """Write to ``-o FILE`` (``-`` for stdout) or to ``default_name`` here, and say where."""
    if output == "-":
        sys.stdout.buffer.write(data)
        sys.stdout.flush()
        return
    path = write_output(Path(output or default_name), data)
    print(path)


def _cmd_trail(args: argparse.Namespace) -> int:
    record = _load_session(args)
    drawing = render_trail(record, args.format, session_names(record))
    output = args.output
    if drawing.hint and output not in (None, "-"):
        output = str(Path(output).with_suffix(".dot"))
    _emit(drawing.data, output, f"{output_stem(record.id)}-trail.{drawing.format}")
    if drawing.hint:
        print(f"ohmtrail: {drawing.hint}", file=sys.stderr)
        return 1
    return 0


def _cmd_report(args: argparse.Namespace) -> int:
    record = _load_session(args)
    _emit(render_report(record, args.format, session_names(record)), args.output,
          f"{output_stem(record.id)}-report.{args.format}")
    return 0


def _cmd_export(args: argparse.Namespace) -> int:
    record = _load_session(args)
    _emit(export_json(record).encode("utf-8"), args.output,
          f"{output_stem(record.id)}-export.json")
    return 0


def _cmd_verify(args: argparse.Namespace) -> int:
    result = verify_export(read_export(Path(args.file)))
    if result.intact:
        print(f"{args.file}: {result.message}")
        return 0
    place = f"{result.place}: " if result.place else ""
    print(f"{args.file}: {place}{result.message}", file=sys.stderr)
    return 1


def _add_session_command(sub: argparse._SubParsersAction[argparse.ArgumentParser], name: str,
                         help_text: str, description: str) -> argparse.ArgumentParser:
    p = sub.add_parser(name, help=help_text, description=description)
    p.add_argument("session_id", metavar="ID", help="the session id")
    p.add_argument("-o", "--output", metavar="FILE",
                   help="where to write ('-' for standard output; default: a file named after "
                   "the session in the current folder)")
    p.add_argument("--db", metavar="URL", help="session store URL (default: $OHMTRAIL_DB or the "
                   "SQLite store in the user data folder)")
    return p


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

    p = sub.add_parser("predict", help="predicted meter readings of every test under every fault",
                       description="Compute what the meter should read at every test of a ruleset under "
                       "every fault (and with no fault), by Monte Carlo over tolerances and fault "
                       "magnitudes through the meter model. Results are cached by the ruleset's content.")
    p.add_argument("ruleset", metavar="RULESET", help="a ruleset file")
    p.add_argument("--fault", metavar="ID", help="show only this fault (and 'none'), with ranges")
    p.add_argument("--json", action="store_true", help="print JSON: ruleset, faults, tests, predictions")
    p.add_argument("--meter", metavar="FILE", help="a meter profile (default: the bundled 2000-count handheld)")
    p.add_argument("--samples", type=int, default=64, metavar="N", help="samples per hypothesis (default 64)")
    p.add_argument("--seed", type=int, default=0, help="random seed (default 0)")
    p.add_argument("--no-cache", action="store_true", help="compute afresh; neither read nor write the cache")
    p.set_defaults(handler=_cmd_predict)

    p = sub.add_parser("spice", help="write a SPICE deck of the circuit as modelled",
                       description="Write a SPICE deck of the ruleset's circuit at nominal values in one "
                       "operating state, with a fault injected (magnitude at the middle of its range), "
                       "relays, fuses and motors settled. Check it with: ngspice -b FILE")
    p.add_argument("ruleset", metavar="RULESET", help="a ruleset file")
    p.add_argument("--fault", metavar="ID", help="inject this fault (default: none)")
    p.add_argument("--state", metavar="S", help="operating state (default: the ruleset's first)")
    p.add_argument("-o", "--output", metavar="FILE", help="write to FILE instead of standard output")
    p.set_defaults(handler=_cmd_spice)
    p = _add_session_command(
        sub, "trail", "draw a session's decision trail",
        "Draw the path a session took (complaint, each test with its reading against the healthy "
        "range and the leading suspects, skipped and re-measured tests, rules fired, conclusion, "
        "repair, verification) with graphviz. Without graphviz's dot program the DOT source is "
        "written instead, with a hint, and the exit status is 1.")
    p.add_argument("--format", choices=("svg", "pdf", "png", "dot"), default="svg",
                   help="drawing format (default: svg)")
    p.set_defaults(handler=_cmd_trail)

    p = _add_session_command(
        sub, "report", "write a session's claim report",
        "Write the printable claim report of a session: vehicle, complaint, technician, meter, "
        "ruleset and its hash, every step, the diagnosis and alternatives, repair, verification, "
        "the trail, the cautions and the session digest. An open session is marked in progress.")
    p.add_argument("--format", choices=("pdf", "html"), default="pdf",
                   help="report format (default: pdf)")
    p.set_defaults(handler=_cmd_report)

    p = _add_session_command(
        sub, "export", "export a session as sealed JSON",
        "Write a session as JSON (export format 1, docs/export-format.md) with its hash chain and "
        "session digest, for `ohmtrail verify`.")
    p.set_defaults(handler=_cmd_export)

    p = sub.add_parser("verify", help="check an exported session's hash chain",
                       description="Recompute the hash chain and the session digest of an "
                       "exported session. Prints 'intact' and exits 0, or names the first step "
                       "or field that differs and exits 1.")
    p.add_argument("file", metavar="FILE", help="a JSON file written by `ohmtrail export`")
    p.set_defaults(handler=_cmd_verify)
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

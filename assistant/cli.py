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
from typing import TYPE_CHECKING

from assistant import __version__
from assistant.errors import LocatedError, OhmtrailError, OutputError
from assistant.cases import check_paths, default_predictor
from assistant.coverage import DEFAULT_SEPARATION, coverage, coverage_text
from assistant.export import export_json, read_export, verify_export
from assistant.history import HEADER as HISTORY_HEADER
from assistant.history import Repair, default_ruleset_roots, known_ruleset_ids, read_history, repairs_from_store
from assistant.learn import learn
from assistant.netgraph import FORMATS as GRAPH_FORMATS
from assistant.netgraph import circuit_graph, render_graph
from assistant.overlay import beside_path, overlay_document
from assistant.record import SessionRecord
from assistant.report import output_stem, render_report, session_names, write_output
from assistant.ruleset import lint_paths
from assistant.ruleset.lint import check_ruleset, summary
from assistant.ruleset.load import LoadedRuleset, load_ruleset
from assistant.scaffold import FAMILIES, write_scaffold
from assistant.ruleset.model import Ruleset
from assistant.trail import render_trail

if TYPE_CHECKING:
    from assistant.meter import MeterProfile
    from assistant.session import Engine
    from assistant.sources import ReadingSource

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


def _count(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"'{text}' is not a whole number") from None
    if value < 0:
        raise argparse.ArgumentTypeError(f"'{text}' must not be negative")
    return value


def _fraction(text: str) -> float:
    value = _positive_float(text)
    if value > 1:
        raise argparse.ArgumentTypeError(f"'{text}' must be a fraction between 0 and 1")
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


def _load_checked(path: str) -> LoadedRuleset:
    return check_ruleset(load_ruleset(path))


def _cmd_predict(args: argparse.Namespace) -> int:
    from assistant.meter import load_meter_profile
    from assistant.predict import predict, prediction_json, prediction_text

    loaded = check_ruleset(load_with_overlays(args))
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


def _progress_bar(done: int, total: int) -> None:
    width = 30
    filled = width * done // max(total, 1)
    end = "\n" if done >= total else ""
    print(f"\r[{'#' * filled}{'.' * (width - filled)}] {done}/{total} runs", end=end, file=sys.stderr, flush=True)


def _cmd_simulate(args: argparse.Namespace) -> int:
    from assistant import predict as predict_module
    from assistant.simulate import complaint_context, simulate, vehicle_table

    if args.trials < 1:
        raise OhmtrailError(f"--trials must be at least 1, not {args.trials}")
    loaded = check_ruleset(load_with_overlays(args))
    complaint_context(loaded, args.complaint)  # an unknown complaint fails before the slow part
    table = predict_module.predict(loaded, seed=args.seed)
    vehicles = vehicle_table(loaded, seed=args.seed)
    show_bar = not args.json and sys.stdout.isatty() and sys.stderr.isatty()
    result = simulate(loaded, table, trials=args.trials, seed=args.seed, threshold=args.threshold,
                      progress=_progress_bar if show_bar else None, vehicles=vehicles,
                      complaint=args.complaint)
    if args.json:
        print(json.dumps(result.to_json(), indent=2))
        return 0
    optimum = result.optimal_noise_free_minutes
    print(f"{result.ruleset}: {result.hypotheses} hypotheses x {result.trials} trials, "
          f"threshold {result.threshold:g}, seed {result.seed}"
          + (f", complaint {result.complaint}" if result.complaint else ""))
    print(f"{'strategy':<22}{'accuracy':>10}{'tests':>8}{'minutes':>9}")
    print(f"{'planner':<22}{result.accuracy:>10.3f}{result.mean_tests:>8.2f}{result.mean_minutes:>9.2f}")
    for name, fig in (("linear walk", result.linear_walk), ("half-split", result.half_split),
                      ("walk, then planner", result.linear_walk_finished)):
        print(f"{name:<22}{fig.accuracy:>10.3f}{fig.mean_tests:>8.2f}{fig.mean_minutes:>9.2f}")
    walks = (("linear walk", result.linear_walk), ("walk, then planner", result.linear_walk_finished))
    ratios = [f"{result.mean_minutes / fig.mean_minutes:.2f} x the {name}" for name, fig in walks if fig.mean_minutes > 0]
    if ratios:
        print("planner's minutes: " + "; ".join(ratios))
    print(f"worst planner run: {result.worst_minutes:.1f} min")
    costly = result.where_minutes_go(5)
    if costly and result.mean_minutes > 0:
        print("where the planner's minutes go (prior x minutes: share of the mean):")
        for fault, prior, minutes, share in costly:
            print(f"  {fault:<36}{prior:>6.1%} x {minutes:>5.1f} min: {share:>4.0%}")
    if result.rules_at_start:
        print("rules fired at the start: " + ", ".join(result.rules_at_start))
    if result.rule_tests:
        print("tests the rules asked for (share of runs: tests, minutes a run):")
        for asked in result.rule_tests:
            print(f"  {asked.rule:<36}{asked.runs:>6.0%}: {asked.mean_tests:>4.2f} tests, "
                  f"{asked.mean_minutes:>5.2f} min")
    print(f"noise-free: planner {result.planner_noise_free_minutes:.2f} min, optimum "
          + (f"{optimum:.2f} min" if optimum is not None else "not found within 60 s"))
    if result.floor_minutes is not None:
        print(f"floor: {result.floor_minutes:.2f} min (no diagnosis that names each fault at the threshold "
              "spends less on average; `ohmtrail coverage` gives it fault by fault)")
    for group in result.ambiguity_groups:
        print("no test tells apart: " + ", ".join(group))
    return 0


def _load_session(args: argparse.Namespace) -> SessionRecord:
    from assistant.store import open_store

    store = open_store(args.db)
    return store.load(store.find(args.session_id))  # an id or a unique prefix of one


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
    p.add_argument("session_id", metavar="ID", help="the session id (or a unique start of it)")
    p.add_argument("-o", "--output", metavar="FILE",
                   help="where to write ('-' for standard output; default: a file named after "
                   "the session in the current folder)")
    p.add_argument("--db", metavar="URL", help="session store URL (default: $OHMTRAIL_DB or the "
                   "SQLite store in the user data folder)")
    return p


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


def _cmd_check(args: argparse.Namespace) -> int:
    report = check_paths(args.paths, default_predictor(args.samples, args.seed), beside=not args.no_overlay)
    for problem in report.problems:
        print(problem, file=sys.stderr)
    for r in report.results:
        if r.passed:
            print(f"PASS  {r.ruleset_id}: {r.case_id}  ({r.diagnosis} {r.probability:.2f}; "
                  f"{len(r.asked)} test{'s' if len(r.asked) != 1 else ''}, {r.minutes:g} min)")
        else:
            print(f"FAIL  {r.ruleset_id}: {r.case_id}")
            for difference in r.differences:
                print(f"      {difference}")
            print(f"      asked: {', '.join(r.asked) or 'nothing'}")
    for path in report.without_cases:
        print(f"note: {path} has no cases")
    if report.files == 0:
        raise OhmtrailError(f"no ruleset files (*.yaml) under {', '.join(args.paths)}")
    failed = sum(not r.passed for r in report.results)
    rulesets = report.files
    line = (f"{len(report.results)} case{'s' if len(report.results) != 1 else ''} in {rulesets} "
            f"ruleset{'s' if rulesets != 1 else ''}: {len(report.results) - failed} passed, {failed} failed")
    if report.problems:
        line += f"; {len(report.problems)} ruleset problem{'s' if len(report.problems) != 1 else ''}"
    print(line, file=sys.stdout if report.ok else sys.stderr)
    return 0 if report.ok else 1


def _cmd_coverage(args: argparse.Namespace) -> int:
    from assistant.predict import predict
    from assistant.simulate import vehicle_table

    loaded = check_ruleset(load_with_overlays(args))
    table = predict(loaded, samples=args.samples, seed=args.seed)
    vehicles = vehicle_table(loaded, samples=args.samples, seed=args.seed) if args.runs > 0 else None
    result = coverage(loaded, table, runs=args.runs, seed=args.seed, separation=args.separation,
                      vehicles=vehicles)
    if args.json:
        print(json.dumps(result.to_json(), indent=2))
    else:
        print(coverage_text(result))
    return 0


# --------------------------------------------------------------------------- diagnosis sessions


def _meter(args: argparse.Namespace) -> tuple[MeterProfile | None, str]:
    from assistant.meter import load_meter_profile

    path = getattr(args, "meter", None)
    return (load_meter_profile(path), str(Path(path).resolve())) if path else (None, "default")


def _source(args: argparse.Namespace, engine: Engine, *, narrate: bool) -> ReadingSource:
    """The reading source the options ask for: an answers file, the simulator, or the prompt."""
    from assistant.simulate import vehicle_table
    from assistant.sources import AnswersFileSource, Narrated, SimulatedSource, load_answers

    loaded, table = engine.loaded, engine.table
    source: ReadingSource
    if args.answers:
        source = AnswersFileSource(load_answers(args.answers, loaded.ruleset, table.tests))
    elif args.simulate:
        intake = load_answers(args.context, loaded.ruleset, table.tests).intake if args.context else None
        # the vehicle comes from a second Monte Carlo run, not from the samples the engine reasons on
        vehicles = vehicle_table(loaded, engine.pages.meter, samples=int(table.samples.shape[2]))
        source = SimulatedSource(vehicles, args.simulate, args.seed, intake)
    else:
        from assistant.prompt import PromptSource

        if not (sys.stdin.isatty() and sys.stdout.isatty()):
            raise OhmtrailError("the interactive prompt needs a terminal; give --answers FILE or --simulate FAULT_ID")
        return PromptSource(loaded.ruleset)
    return Narrated(source, print) if narrate else source


def _finish(record: SessionRecord, store_where: str, as_json: bool) -> int:
    from assistant.session import summary_json

    if as_json:
        print(json.dumps(summary_json(record), indent=2))
        return 0
    ended = {"open": "left open", "concluded": "concluded (repair not yet recorded)", "closed": "closed"}
    print(f"\nSession {record.id} {ended.get(record.status, record.status)}: {len(record.steps)} steps "
          f"saved in {store_where}")
    if record.status != "closed":
        print(f"  carry on with: ohmtrail resume {record.id}")
    print(f"  export, trail, report: ohmtrail export|trail|report {record.id}")
    return 0


def _cmd_diagnose(args: argparse.Namespace) -> int:
    from assistant.session import Engine, Session
    from assistant.store import open_store

    if args.context and not args.simulate:
        raise OhmtrailError("--context gives the vehicle and complaint for --simulate; an answers file holds its own")
    if args.ruleset:
        loaded = check_ruleset(load_with_overlays(args))
    elif args.answers or args.simulate:
        raise OhmtrailError("--answers and --simulate need a RULESET")
    else:
        from assistant.catalogue import catalogue
        from assistant.prompt import choose_ruleset

        args.ruleset = choose_ruleset(catalogue()).path
        loaded = check_ruleset(load_with_overlays(args))
    meter, meter_name = _meter(args)
    store = open_store(args.db)  # before the slow part: a store that cannot be opened stops here
    with store:
        engine = Engine.build(loaded, meter)
        source = _source(args, engine, narrate=not args.json)
        session = Session.begin(store, engine, source, meter_name=meter_name, threshold=args.threshold,
                                session_id=args.id)
        record = session.run(source)
        return _finish(record, store.where, args.json)


def _cmd_resume(args: argparse.Namespace) -> int:
    from assistant.session import Session, engine_for_record
    from assistant.store import open_store

    meter, _ = _meter(args)
    with open_store(args.db) as store:
        session = Session.resume(store, args.session_id, lambda record: engine_for_record(record, meter))
        args.context = None
        source = _source(args, session.engine, narrate=not args.json)
        lines = session.recap()
        if not args.json:
            print(f"Resuming session {session.id} ({len(lines)} entries so far):")
            for line in lines:
                print(f"  {line}")
        record = session.run(source)
        return _finish(record, store.where, args.json)


def _cmd_sessions(args: argparse.Namespace) -> int:
    from assistant.session import session_json
    from assistant.store import open_store

    with open_store(args.db) as store:
        summaries = store.list()
        if args.json:
            print(json.dumps([session_json(store.load(s.id)) for s in summaries], indent=2))
            return 0
        if not summaries:
            print(f"no sessions in {store.where}")
            return 0
        rows = [("ID", "STARTED", "STATUS", "STEPS", "RULESET", "VEHICLE", "DIAGNOSIS")]
        for s in summaries:
            found = f"{s.diagnosis} {s.probability:.0%}" if s.diagnosis and s.probability is not None else "-"
            rows.append((s.id, s.started[:16].replace("T", " "), s.status, str(s.steps), s.ruleset_id,
                         s.vehicle or "-", found))
        widths = [max(len(r[i]) for r in rows) for i in range(len(rows[0]))]
        for r in rows:
            print("  ".join(cell.ljust(w) for cell, w in zip(r, widths)).rstrip())
    return 0


def _add_reading_source_options(p: argparse.ArgumentParser) -> None:
    group = p.add_mutually_exclusive_group()
    group.add_argument("--answers", metavar="FILE",
                       help="take the readings from a YAML or JSON file (complaint, vehicle, readings by "
                       "test id); a test the file lacks is skipped")
    group.add_argument("--simulate", metavar="FAULT_ID",
                       help="let the circuit model answer as the meter would with this fault (or 'none'), "
                       "on a vehicle from a second Monte Carlo run, not the samples the diagnosis reasons on")
    p.add_argument("--seed", type=_count, default=0, metavar="S",
                   help="random seed of --simulate: the vehicle and the meter's noise (default 0)")
    p.add_argument("--json", action="store_true",
                   help="print one JSON object at the end (session, diagnosis, probability, steps) instead "
                   "of the conversation")
    p.add_argument("--db", metavar="URL", help="session store: sqlite:///FILE or postgresql://... (default: "
                   "$OHMTRAIL_DB or sessions.db in the user data folder)")
    p.add_argument("--meter", metavar="FILE", help="meter profile YAML (default: a 2000-count handheld; for "
                   "resume, the one the session started with)")


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
    p.add_argument("--seed", type=_count, default=0, help="random seed (default 0)")
    p.add_argument("--no-cache", action="store_true", help="compute afresh; neither read nor write the cache")
    add_overlay_options(p)
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

    p = sub.add_parser("simulate", help="simulate diagnoses of every fault and compare with the walks",
                       description="For every hypothesis draw readings from the circuit model with "
                       "meter noise (vehicles from a second Monte Carlo run, not the samples the "
                       "planner's evidence was built from), run the planner to its stop, and report "
                       "accuracy, tests and "
                       "minutes (prior-weighted) beside the linear walk, half-split, the walk finished "
                       "by the planner (to the planner's certainty), the noise-free optimum and the floor "
                       "(the least any diagnosis that names each fault at the threshold can spend), "
                       "and the minutes of the tests the decision rules asked for.")
    p.add_argument("ruleset", metavar="RULESET", help="ruleset file")
    p.add_argument("--trials", type=int, default=20, metavar="N", help="runs per hypothesis (default 20)")
    p.add_argument("--seed", type=_count, default=0, metavar="S", help="random seed (default 0)")
    p.add_argument("--threshold", type=float, default=None, metavar="P",
                   help="stop when a fault reaches P (default: the ruleset's threshold)")
    p.add_argument("--complaint", metavar="ID", default=None,
                   help="the vehicles come in with this complaint (an id from the ruleset): the planner "
                   "starts from it and the faults are weighted by their probability given it")
    p.add_argument("--json", action="store_true", help="print the figures as JSON")
    add_overlay_options(p)
    p.set_defaults(handler=_cmd_simulate)

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
    p = sub.add_parser("check", help="run every ruleset's cases; exit 1 on any failure",
                       description="Run the cases of every ruleset under the paths (default: rulesets/) "
                       "through the diagnosis engine, answering each proposed test with the case's "
                       "reading and skipping the others. Prints PASS or FAIL per case with what differs; "
                       "exit 1 on any failure or any ruleset that cannot be run.")
    p.add_argument("paths", nargs="*", metavar="PATH", default=["rulesets"])
    p.add_argument("--samples", type=int, default=64, metavar="N", help="prediction samples per hypothesis")
    p.add_argument("--seed", type=_count, default=0, help="random seed of the predictions (default 0)")
    p.add_argument("--no-overlay", action="store_true", help="ignore the NAME.overlay.yaml beside each ruleset")
    p.set_defaults(handler=_cmd_check)

    p = sub.add_parser("coverage", help="what a ruleset's tests can tell apart, and at what cost",
                       description="Report, for each fault, whether any test tells it from every other "
                       "(ambiguity groups), the expected minutes to isolate it in simulated diagnoses, "
                       "its floor (the least minutes any diagnosis must spend to name it at the "
                       "threshold, with the tests that set it), the tests that never change any "
                       "decision, the faults no complaint leads to, the operating states the tests "
                       "need, and the looks answered by hand-written rows rather than by the circuit. "
                       "--json gives the shape in docs/authoring.md.")
    p.add_argument("ruleset", metavar="RULESET")
    p.add_argument("--json", action="store_true", help="print JSON")
    p.add_argument("--runs", type=_count, default=4, metavar="N",
                   help="simulated diagnoses per hypothesis, each on one vehicle from a second Monte Carlo "
                   "run (default 4; 0 skips the simulation)")
    p.add_argument("--samples", type=int, default=64, metavar="N", help="prediction samples per hypothesis")
    p.add_argument("--seed", type=_count, default=0, help="random seed (default 0)")
    p.add_argument("--separation", type=_fraction, default=DEFAULT_SEPARATION, metavar="F",
                   help="how much of two hypotheses' predicted readings must differ for a test to tell "
                   f"them apart (default {DEFAULT_SEPARATION})")
    add_overlay_options(p)
    p.set_defaults(handler=_cmd_coverage)

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

    p = sub.add_parser("diagnose", help="run a diagnosis: one measurement at a time, every answer saved",
                       description="Diagnose a circuit: ohmtrail asks for one measurement at a time (where, "
                       "how to set the meter, the cautions, the healthy range), takes the reading as typed, "
                       "and stops when one fault is certain enough. Every answer is saved before the next "
                       "question; `ohmtrail resume ID` carries on. Without RULESET, pick one from the "
                       "bundled and configured rulesets. At the prompt, type help for the commands.")
    p.add_argument("ruleset", metavar="RULESET", nargs="?", help="a ruleset file")
    _add_reading_source_options(p)
    p.add_argument("--context", metavar="FILE",
                   help="with --simulate: the vehicle, technician, complaint and fault codes, from a file in "
                   "the answers format (no readings)")
    p.add_argument("--threshold", type=float, metavar="P",
                   help="stop when a fault reaches this probability (default: the ruleset's)")
    p.add_argument("--id", metavar="ID", help="the new session's id (default: time and a random suffix)")
    add_overlay_options(p)
    p.set_defaults(handler=_cmd_diagnose)

    p = sub.add_parser("resume", help="carry on with a session that was left open",
                       description="Carry on with a session where it stopped: the answers so far are shown "
                       "and kept, and the next question is asked. The ruleset file must be unchanged.")
    p.add_argument("session_id", metavar="ID", help="the session id (a unique prefix will do)")
    _add_reading_source_options(p)
    p.set_defaults(handler=_cmd_resume)

    p = sub.add_parser("sessions", help="list the stored sessions",
                       description="List the sessions in the store: id, started, status, steps, ruleset, "
                       "vehicle and diagnosis. With --json, every session with its steps.")
    p.add_argument("--json", action="store_true", help="print JSON: every session with its steps")
    p.add_argument("--db", metavar="URL", help="session store URL (default: $OHMTRAIL_DB or the user data folder)")
    p.set_defaults(handler=_cmd_sessions)

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

"""The technician at the terminal: a prompt-toolkit reading source.

One measurement at a time: the test page, then a prompt that takes a reading as typed
(``11.8``, ``118 mV``, ``6k5``, ``OL``, ``yes``) or a command. Commands complete with Tab;
``help`` lists them. The bottom toolbar shows the three leading suspects. Ctrl-C never loses
anything (it says how to leave); Ctrl-D leaves the session open, saved, to resume later.
"""

from __future__ import annotations

import logging
import re
from collections.abc import Callable, Sequence
from typing import TYPE_CHECKING, Any

from prompt_toolkit import PromptSession, print_formatted_text
from prompt_toolkit.completion import NestedCompleter, WordCompleter

from assistant.errors import ReadingError, SessionError
from assistant.page import Question, render_closing, render_page, render_suspects
from assistant.reading import parse_reading
from assistant.record import VehicleInfo
from assistant.sources import Action, Answer, Closing, Intake, Note, Quit, Remeasure, Skip, Undo

if TYPE_CHECKING:
    from prompt_toolkit.input import Input
    from prompt_toolkit.output import Output

    from assistant.catalogue import Entry
    from assistant.page import ClosingPage
    from assistant.ruleset.model import Ruleset

log = logging.getLogger("ohmtrail.prompt")

COMMANDS = {
    "why": "the numbers behind this choice of test",
    "suspects": "the ranked table of suspects",
    "skip": "cannot make this test now: choose another",
    "undo": "take back the last answer",
    "note": "note TEXT: add a note to the record",
    "remeasure": "remeasure TEST: take a test again",
    "quit": "stop here; the session is saved and `ohmtrail resume ID` carries on",
    "help": "this list",
}
HELP = "Type the reading as the meter shows it (12.4, 118 mV, 6k5, OL) or yes/no; or a command:\n" + "\n".join(
    f"  {name:<10} {text}" for name, text in COMMANDS.items())
_CTRL_C = "Ctrl-C: nothing is lost. Type quit to stop (the session is saved), or give the reading."
_ODOMETER = re.compile(r"^\s*([\d.,_ ]+?)\s*(km|mi|miles)?\s*$", re.IGNORECASE)
_MILE_KM = 1.609344  # international mile, exact by definition


class _Cancelled(Exception):
    """Ctrl-D at a prompt."""


class PromptSource:
    """Readings typed by a technician. ``input``/``output`` default to the terminal; tests give a pipe."""

    label = "prompt"

    def __init__(self, ruleset: Ruleset, *, input: Input | None = None, output: Output | None = None,
                 write: Callable[[str], None] | None = None) -> None:
        self.ruleset = ruleset
        self._session: PromptSession[str] = PromptSession(input=input, output=output)
        self._output = output
        self.write = write or self._print
        self._ranking: tuple[tuple[str, float], ...] = ()
        self._last_shown: str | None = None

    def _print(self, text: str) -> None:
        print_formatted_text(text, output=self._output)

    # ------------------------------------------------------------------ reading lines

    def _line(self, message: str, *, completer: Any = None, default: str = "") -> str:
        """One line; Ctrl-C says how to leave and asks again, Ctrl-D raises _Cancelled."""
        while True:
            try:
                return self._session.prompt(message, completer=completer, default=default,
                                            bottom_toolbar=self.toolbar, complete_while_typing=False).strip()
            except KeyboardInterrupt:
                self.write(_CTRL_C)
            except EOFError as exc:
                raise _Cancelled from exc

    def toolbar(self) -> str:
        """The bottom toolbar: the three leading suspects and their probabilities."""
        if not self._ranking:
            return " ohmtrail · help for commands"
        top = "  ".join(f"{h} {p:.0%}" for h, p in self._ranking[:3])
        return f" Suspects: {top}  · help for commands"

    # ------------------------------------------------------------------ the source protocol

    def intake(self, ruleset: Ruleset) -> Intake:
        try:
            return self._intake(ruleset)
        except _Cancelled as exc:
            raise SessionError("stopped before the first test; nothing was saved") from exc

    def _intake(self, ruleset: Ruleset) -> Intake:
        self.write(f"{ruleset.title} ({ruleset.id} {ruleset.version}). Press Enter to leave a field empty.")
        vin = self._line("Vehicle identification number: ") or None
        fleet = self._line("Fleet number: ") or None
        odometer = self._ask_parsed("Odometer (km, or add 'mi'): ", _odometer)
        year = self._ask_parsed("Model year: ", _model_year)
        technician = self._line("Technician: ") or None
        complaint = self._complaint(ruleset)
        codes = self._line("Fault codes present (space separated): ")
        return Intake(technician=technician,
                      vehicle=VehicleInfo(vin=vin, odometer_km=odometer, model_year=year, fleet_number=fleet),
                      complaint=complaint, fault_codes=tuple(c for c in re.split(r"[\s,;]+", codes) if c))

    def _ask_parsed(self, message: str, parse: Callable[[str], Any]) -> Any:
        while True:
            text = self._line(message)
            if not text:
                return None
            try:
                return parse(text)
            except ValueError as exc:
                self.write(f"not taken: {exc}")

    def _complaint(self, ruleset: Ruleset) -> str | None:
        if not ruleset.complaints:
            return None
        self.write("Complaint:")
        for i, c in enumerate(ruleset.complaints, 1):
            self.write(f"  {i}. {c.text} [{c.id}]")
        ids = [c.id for c in ruleset.complaints]
        completer = WordCompleter(ids)
        while True:
            text = self._line("Complaint (number or id, Enter for none): ", completer=completer)
            if not text:
                return None
            if text.isdigit() and 1 <= int(text) <= len(ids):
                return ids[int(text) - 1]
            if text in ids:
                return text
            self.write(f"not taken: '{text}' is not one of 1-{len(ids)} or {', '.join(ids)}")

    def ask(self, question: Question) -> Action:
        self._ranking = question.ranking
        key = f"{question.test.id}/{question.answered}/{question.page.remeasure}"
        if key != self._last_shown:
            self.write(render_page(question))
            self._last_shown = key
        completer = completer_for(question)
        while True:
            try:
                text = self._line(f"{question.test.id}> ", completer=completer)
            except _Cancelled:
                self.write("Ctrl-D: the session is saved; `ohmtrail resume` carries on.")
                return Quit()
            action = self._command(text, question)
            if action is not None:
                return action

    def _command(self, text: str, question: Question) -> Action | None:
        """The action a typed line means, or None when it was handled here (help, why, a refusal)."""
        if not text:
            self.write("Type the reading, or help for the commands.")
            return None
        word, _, rest = text.partition(" ")
        word, rest = word.lower(), rest.strip()
        if word in ("help", "?"):
            self.write(HELP)
        elif word == "why":
            self.write(question.why)
        elif word == "suspects":
            self.write(render_suspects(question.ranking, self.ruleset))
        elif word == "skip":
            return Skip()
        elif word == "undo":
            return Undo()
        elif word in ("quit", "exit"):
            return Quit()
        elif word == "note":
            if rest:
                return Note(rest)
            self.write("not taken: a note needs text, e.g. note holder contacts green with corrosion")
        elif word == "remeasure":
            if rest in question.test_ids:
                return Remeasure(rest)
            self.write(f"not taken: remeasure needs a test id, one of: {', '.join(question.test_ids)}")
        else:
            try:
                return Answer(text=text, reading=parse_reading(text, question.test))
            except ReadingError as exc:
                if text[:1].isalpha() and question.test.kind != "observation":
                    self.write(f"not taken: unknown command '{word}'; type help for the commands, "
                               f"or a reading such as 12.4 V")
                else:
                    self.write(f"not taken: {exc}")
        return None

    def refused(self, question: Question, reason: str) -> None:
        self.write(f"not taken: {reason}")

    def tell(self, message: str) -> None:
        self.write(message)

    def close(self, page: ClosingPage) -> Closing | None:
        self._ranking = tuple(page.conclusion.ranking)
        self.write(render_closing(page))
        try:
            repair = self._line("Repair done (Enter to leave the session open until it is done): ",
                                default=page.repair_action or "")
            if not repair:
                self.write("The session stays open; `ohmtrail resume` records the repair later.")
                return None
            if page.verification is None:
                return Closing(repair)
            self.write(render_page(page.verification, heading="Verification"))
            while True:
                text = self._line(f"verification {page.verification.test.id}> ")
                if not text:
                    return Closing(repair)
                try:
                    return Closing(repair, Answer(text=text, reading=parse_reading(text, page.verification.test)))
                except ReadingError as exc:
                    self.write(f"not taken: {exc}")
        except _Cancelled:
            self.write("Ctrl-D: the session stays open; `ohmtrail resume` records the repair later.")
            return None


def completer_for(question: Question) -> NestedCompleter:
    """Tab completion at a test prompt: the commands, test ids after remeasure, the outcomes."""
    words: dict[str, Any] = {name: None for name in COMMANDS}
    words["remeasure"] = {t: None for t in question.test_ids}
    for outcome in question.page.outcomes:
        words[outcome] = None
    return NestedCompleter.from_nested_dict(words)


def _odometer(text: str) -> float:
    match = _ODOMETER.match(text)
    if not match:
        raise ValueError(f"'{text}' is not a distance; type e.g. 181000 or 112000 mi")
    digits = re.sub(r"[,_ ]", "", match.group(1))
    try:
        value = float(digits)
    except ValueError as exc:
        raise ValueError(f"'{text}' is not a distance; type e.g. 181000 or 112000 mi") from exc
    if value < 0 or value > 5e6:
        raise ValueError(f"'{text}' is not a plausible odometer reading")
    unit = (match.group(2) or "km").lower()
    return round(value * _MILE_KM if unit.startswith("mi") else value, 1)


def _model_year(text: str) -> int:
    if not text.isdigit() or not 1950 <= int(text) <= 2100:
        raise ValueError(f"'{text}' is not a model year; type e.g. 2021")
    return int(text)



def choose_ruleset(entries: Sequence[Entry], *, input: Input | None = None, output: Output | None = None,
                   write: Callable[[str], None] | None = None) -> Entry:
    """Let the technician pick a ruleset from the catalogue, listed by circuit family."""
    if not entries:
        raise SessionError("no rulesets found; give a RULESET file, or set OHMTRAIL_RULESETS to a folder of them")
    say = write or (lambda text: print_formatted_text(text, output=output))
    family = None
    for i, entry in enumerate(entries, 1):
        if entry.family != family:
            family = entry.family
            say(family)
        say(f"  {i}. {entry.title} [{entry.id} {entry.version}]{' (shop)' if entry.origin != 'bundled' else ''}")
    ids = [e.id for e in entries]
    session: PromptSession[str] = PromptSession(input=input, output=output)
    while True:
        try:
            text = session.prompt("Ruleset (number or id): ", completer=WordCompleter(ids)).strip()
        except KeyboardInterrupt:
            say("Ctrl-C: nothing started yet; Ctrl-D leaves.")
            continue
        except EOFError as exc:
            raise SessionError("no ruleset chosen; nothing was started") from exc
        if text.isdigit() and 1 <= int(text) <= len(entries):
            return entries[int(text) - 1]
        if text in ids:
            return entries[ids.index(text)]
        say(f"not taken: '{text}' is not one of 1-{len(entries)} or a ruleset id")

"""The workflow editor's form: its rows as typed, the definition they make, each problem beside its row.

The form numbers its rows from 1 ("State 3", "Transition 4"); a transition picks its states
from a list whose values are state rows, so renaming a state renames it in every transition.
A row is left out of the definition when it is blank or marked for removal; the rows stay on
the page as typed when the workflow is refused, so the numbering of an error is the numbering
the person sees. The definition's problems (:func:`server.workflow.parse_workflow` names them
with paths such as ``transitions[3].to``, counting only the rows kept) are mapped back to the
form's rows and worded for people (:func:`place_errors`).

A state carries ``archives`` ("entering it archives the record") when the definition carries
that key: the editor then shows a checkbox per state and writes the key for every state kept.
"""

from __future__ import annotations

import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

from server.workflow import MAX_APPROVALS, MAX_STATES, MAX_TRANSITIONS, TRANSITION_ROLES

__all__ = ["StateRow", "TransitionRow", "WorkflowForm", "PlacedErrors", "form_from_definition", "read_form",
           "definition_of", "place_errors", "EXTRA_STATES", "EXTRA_TRANSITIONS", "FIELD_WORDS"]

EXTRA_STATES = 2         # empty rows offered to add with
EXTRA_TRANSITIONS = 2
ARCHIVES = "archives"    # the state flag "entering this state archives the record"

# The words of a row's fields, for the messages beside them and in the summary.
FIELD_WORDS = {"name": "name", "initial": "initial", "signed_off": "signed off", "description": "description",
               ARCHIVES: "archives the record", "from": "from state", "to": "to state", "roles": "roles",
               "demands": "demands", "demands.approvals": "approvals needed",
               "demands.checks_pass": "checks pass or are waived", "demands.no_stale_approvals": "no stale approval"}
# the form control of a transition's field (its id is tr-{row}-{suffix})
TRANSITION_CONTROLS = {"name": "name", "from": "from", "to": "to", "roles": "roles", "demands.approvals": "approvals",
                       "demands.checks_pass": "checks_pass", "demands.no_stale_approvals": "no_stale"}
STATE_CONTROLS = {"name": "name", "initial": "initial", "signed_off": "signed_off", "description": "description",
                  ARCHIVES: "archives"}
_PATH = re.compile(r"^(states|transitions)\[(\d+)\](?:\.(.+))?$")


@dataclass
class StateRow:
    name: str = ""
    initial: bool = False
    signed_off: bool = False
    description: str = ""
    archives: bool = False
    remove: bool = False

    @property
    def blank(self) -> bool:
        return not (self.name or self.description)


@dataclass
class TransitionRow:
    name: str = ""
    source: int | None = None      # a state row
    target: int | None = None
    roles: list[str] = field(default_factory=list)
    approvals: str = "0"           # as typed: a bad number is the definition's problem, shown beside it
    checks_pass: bool = False
    no_stale: bool = False
    remove: bool = False

    @property
    def blank(self) -> bool:
        return not (self.name or self.source is not None or self.target is not None or self.roles)


@dataclass
class WorkflowForm:
    name: str
    states: list[StateRow]
    transitions: list[TransitionRow]
    on_edit: int | None
    archives: bool                 # whether the states carry the archive flag
    version: int | None = None     # the version the form was opened on


@dataclass
class PlacedErrors:
    """Problems by where they show: the workflow's name, the states section, a state row, the
    transitions section, a transition row (by its form row and field), the on-edit choice."""

    name: list[str] = field(default_factory=list)
    states: list[str] = field(default_factory=list)
    state_rows: dict[int, dict[str, list[str]]] = field(default_factory=dict)
    transitions: list[str] = field(default_factory=list)
    transition_rows: dict[int, dict[str, list[str]]] = field(default_factory=dict)
    on_edit: list[str] = field(default_factory=list)
    other: list[str] = field(default_factory=list)
    summary: list[dict[str, str]] = field(default_factory=list)   # {anchor, where, message}, in page order

    def __bool__(self) -> bool:
        return bool(self.summary)


# --- rows from a stored definition ----------------------------------------------------------


def form_from_definition(definition: Mapping[str, Any], version: int | None = None) -> WorkflowForm:
    """The form of a stored definition, with a few empty rows to add with."""
    states = definition.get("states", [])
    index = {s["name"]: k for k, s in enumerate(states)}
    rows = [StateRow(name=s["name"], initial=bool(s.get("initial")), signed_off=bool(s.get("signed_off")),
                     description=s.get("description") or "", archives=bool(s.get(ARCHIVES))) for s in states]
    transitions = [TransitionRow(name=t["name"], source=index.get(t["from"]), target=index.get(t["to"]),
                                 roles=list(t.get("roles") or []), approvals=str(t["demands"]["approvals"]),
                                 checks_pass=bool(t["demands"]["checks_pass"]),
                                 no_stale=bool(t["demands"]["no_stale_approvals"]))
                   for t in definition.get("transitions", [])]
    return WorkflowForm(name=definition.get("name", ""), states=rows + [StateRow() for _ in range(EXTRA_STATES)],
                        transitions=transitions + [TransitionRow() for _ in range(EXTRA_TRANSITIONS)],
                        on_edit=index.get(definition.get("on_edit", "")),
                        archives=any(ARCHIVES in s for s in states), version=version)


# --- rows from a submitted form -------------------------------------------------------------


def _text(form: Mapping[str, Any], key: str) -> str:
    value = form.get(key)
    return " ".join(value.split()) if isinstance(value, str) else ""


def _int(form: Mapping[str, Any], key: str, below: int) -> int | None:
    """A row index or count sent by the form; None when absent or out of range."""
    raw = _text(form, key)
    return int(raw) if raw.isdigit() and int(raw) < below else None


def _ticked(form: Mapping[str, Any], key: str) -> bool:
    return _text(form, key) == "on"


def read_form(form: Any) -> WorkflowForm:
    """The rows of a submitted editor form, as typed."""
    n_states = _int(form, "state_count", MAX_STATES + EXTRA_STATES + 1) or 0
    n_transitions = _int(form, "transition_count", MAX_TRANSITIONS + EXTRA_TRANSITIONS + 1) or 0
    initial = _int(form, "initial", n_states)
    states = [StateRow(name=_text(form, f"state-{i}-name"), initial=initial == i,
                       signed_off=_ticked(form, f"state-{i}-signed_off"),
                       description=_text(form, f"state-{i}-description"), archives=_ticked(form, f"state-{i}-archives"),
                       remove=_ticked(form, f"state-{i}-remove")) for i in range(n_states)]
    getlist = form.getlist if hasattr(form, "getlist") else (lambda key: form.get(key) or [])
    transitions = []
    for i in range(n_transitions):
        roles = [r for r in getlist(f"tr-{i}-roles") if isinstance(r, str) and r]
        transitions.append(TransitionRow(
            name=_text(form, f"tr-{i}-name"), source=_int(form, f"tr-{i}-from", n_states),
            target=_int(form, f"tr-{i}-to", n_states), roles=list(dict.fromkeys(roles)),
            approvals=_text(form, f"tr-{i}-approvals") or "0", checks_pass=_ticked(form, f"tr-{i}-checks_pass"),
            no_stale=_ticked(form, f"tr-{i}-no_stale"), remove=_ticked(form, f"tr-{i}-remove")))
    version = _text(form, "version")
    return WorkflowForm(name=_text(form, "name"), states=states, transitions=transitions,
                        on_edit=_int(form, "on_edit", n_states), archives=_text(form, "has_archives") == "1",
                        version=int(version) if version.isdigit() else None)


def definition_of(wf: WorkflowForm) -> tuple[dict[str, Any], list[int], list[int]]:
    """The definition the form makes, and for each of its states and transitions the form row it
    came from. A transition's state is the name typed in the row it picks (a state row marked for
    removal keeps its name there, so the definition says the state is gone)."""
    def state_name(row: int | None) -> str:
        return wf.states[row].name if row is not None else ""

    states, state_rows = [], []
    for i, s in enumerate(wf.states):
        if s.remove or s.blank:
            continue
        item: dict[str, Any] = {"name": s.name, "initial": s.initial, "signed_off": s.signed_off,
                                "description": s.description}
        if wf.archives:
            item[ARCHIVES] = s.archives
        states.append(item)
        state_rows.append(i)
    transitions, transition_rows = [], []
    for i, t in enumerate(wf.transitions):
        if t.remove or t.blank:
            continue
        approvals: Any = int(t.approvals) if t.approvals.isdigit() else t.approvals
        transitions.append({"name": t.name, "from": state_name(t.source), "to": state_name(t.target),
                            "roles": list(t.roles),
                            "demands": {"approvals": approvals, "checks_pass": t.checks_pass,
                                        "no_stale_approvals": t.no_stale}})
        transition_rows.append(i)
    definition = {"name": wf.name, "states": states, "transitions": transitions, "on_edit": state_name(wf.on_edit)}
    return definition, state_rows, transition_rows


# --- problems beside their rows -------------------------------------------------------------


def _sub_field(rest: str | None) -> str:
    """``roles[2]`` -> ``roles``; ``demands.approvals`` stays."""
    return re.sub(r"\[\d+\]$", "", rest or "")


def _message(key: str, message: str) -> str:
    """The definition's message, worded for a list the person picks from where that reads better."""
    if key == "name" and message.startswith("is required"):
        return "is required: give it a name"
    if key in ("from", "to") and message.startswith("is required"):
        return "choose a state"
    if key == "roles" and message.startswith("is required"):
        return f"tick at least one role ({', '.join(TRANSITION_ROLES)})"
    if key == "demands.approvals" and "whole number" in message:
        return f"must be a whole number from 0 to {MAX_APPROVALS}"
    return message


def place_errors(errors: Sequence[Mapping[str, str]], state_rows: Sequence[int],
                 transition_rows: Sequence[int]) -> PlacedErrors:
    """Each problem of the definition beside the form row and field it concerns, in the form's numbering.

    ``errors`` are {field, message} with the definition's paths (a leading ``definition.`` of the
    service's answer is dropped); ``state_rows`` / ``transition_rows`` map the definition's indices
    to form rows (from :func:`definition_of`).
    """
    placed = PlacedErrors()
    located: list[tuple[tuple[int, int, str], dict[str, str]]] = []
    for e in errors:
        path = e.get("field", "").removeprefix("definition").lstrip(".")
        message = e.get("message", "")
        match = _PATH.match(path)
        if match and match.group(1) == "states" and int(match.group(2)) < len(state_rows):
            row, key = state_rows[int(match.group(2))], _sub_field(match.group(3))
            text = _message(key, message)
            placed.state_rows.setdefault(row, {}).setdefault(key, []).append(text)
            where = f"State {row + 1}" + (f", {FIELD_WORDS.get(key, key)}" if key else "")
            anchor = f"state-{row}-{STATE_CONTROLS.get(key, 'name')}"
            located.append(((1, row, key), {"anchor": anchor, "where": where, "message": text}))
        elif match and match.group(1) == "transitions" and int(match.group(2)) < len(transition_rows):
            row, key = transition_rows[int(match.group(2))], _sub_field(match.group(3))
            text = _message(key, message)
            placed.transition_rows.setdefault(row, {}).setdefault(key, []).append(text)
            where = f"Transition {row + 1}" + (f", {FIELD_WORDS.get(key, key)}" if key else "")
            anchor = f"tr-{row}-{TRANSITION_CONTROLS[key]}" if key in TRANSITION_CONTROLS else f"transition-{row}"
            located.append(((3, row, key), {"anchor": anchor, "where": where, "message": text}))
        elif path == "name":
            placed.name.append(message)
            located.append(((0, 0, ""), {"anchor": "wf-name", "where": "Name of the workflow", "message": message}))
        elif path == "states":
            placed.states.append(message)
            located.append(((1, -1, ""), {"anchor": "states", "where": "States", "message": message}))
        elif path == "on_edit":
            text = "choose a state" if message.startswith("is required") else message
            placed.on_edit.append(text)
            located.append(((2, 0, ""), {"anchor": "on-edit", "where": "State an edited rail goes back to",
                                         "message": text}))
        elif path == "transitions":
            placed.transitions.append(message)
            located.append(((3, -1, ""), {"anchor": "transitions", "where": "Transitions", "message": message}))
        else:
            placed.other.append(message)
            located.append(((4, 0, ""), {"anchor": "workflow-form", "where": "Workflow", "message": message}))
    placed.summary = [item for _, item in sorted(located, key=lambda pair: pair[0][:2])]
    return placed

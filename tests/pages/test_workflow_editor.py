"""The workflow editor's pure parts: reading its form into a definition, placing the definition's
problems beside the form's rows in the form's own numbering, and the diagram drawn from a definition."""

from __future__ import annotations

import copy
import re
import xml.etree.ElementTree as ET

import pytest
from starlette.datastructures import FormData

from server.pages.workflow_diagram import state_order, workflow_svg
from server.pages.workflow_form import (EXTRA_STATES, EXTRA_TRANSITIONS, definition_of, form_from_definition,
                                        place_errors, read_form)
from server.templating import templates
from server.workflow import DEFAULT_WORKFLOW, WorkflowInvalid, parse_workflow

SVG = "{http://www.w3.org/2000/svg}"


def _default() -> dict:
    return copy.deepcopy(DEFAULT_WORKFLOW)


def _form(pairs: list[tuple[str, str]]) -> FormData:
    return FormData(pairs)


BASE = [("name", "quick review"), ("state_count", "4"), ("transition_count", "4"), ("version", "3"),
        ("state-0-name", "open"), ("initial", "0"), ("state-0-description", "being drawn"),
        ("state-1-name", " "),                                          # a blank row: left out
        ("state-2-name", "done"), ("state-2-signed_off", "on"),
        ("state-3-name", "old"), ("state-3-remove", "on"),              # marked for removal: left out
        ("on_edit", "0"),
        ("tr-0-name", "close"), ("tr-0-from", "0"), ("tr-0-to", "2"), ("tr-0-roles", "reviewer"),
        ("tr-0-roles", "manager"), ("tr-0-approvals", "1"), ("tr-0-checks_pass", "on"),
        ("tr-1-name", ""), ("tr-1-from", ""), ("tr-1-to", ""), ("tr-1-approvals", "0"),   # a blank row
        ("tr-2-name", "retire"), ("tr-2-from", "2"), ("tr-2-to", "3"), ("tr-2-roles", "admin"),
        ("tr-2-remove", "on"),                                        # marked for removal
        ("tr-3-name", "reopen"), ("tr-3-from", "2"), ("tr-3-to", "0"), ("tr-3-roles", "designer"),
        ("tr-3-no_stale", "on")]


def test_the_form_makes_a_definition_from_its_rows_picking_states_by_row():
    typed = read_form(_form(BASE))
    assert typed.version == 3 and typed.on_edit == 0 and typed.archives is False
    definition, state_rows, transition_rows = definition_of(typed)
    assert definition == {
        "name": "quick review", "on_edit": "open",
        "states": [{"name": "open", "initial": True, "signed_off": False, "description": "being drawn"},
                   {"name": "done", "initial": False, "signed_off": True, "description": ""}],
        "transitions": [{"name": "close", "from": "open", "to": "done", "roles": ["reviewer", "manager"],
                         "demands": {"approvals": 1, "checks_pass": True, "no_stale_approvals": False}},
                        {"name": "reopen", "from": "done", "to": "open", "roles": ["designer"],
                         "demands": {"approvals": 0, "checks_pass": False, "no_stale_approvals": True}}]}
    assert (state_rows, transition_rows) == ([0, 2], [0, 3])
    assert parse_workflow(definition).initial == "open"


def test_renaming_a_state_renames_it_in_every_transition_that_picks_it():
    pairs = [(k, "finished" if k == "state-2-name" else v) for k, v in BASE]
    definition, _, _ = definition_of(read_form(_form(pairs)))
    assert [(t["from"], t["to"]) for t in definition["transitions"]] == [("open", "finished"), ("finished", "open")]


def test_a_transition_to_a_state_marked_for_removal_is_refused_beside_it_in_the_forms_numbering():
    pairs = [(k, v) for k, v in BASE if k != "tr-2-remove"]          # 'retire' still goes to the removed 'old'
    definition, state_rows, transition_rows = definition_of(read_form(_form(pairs)))
    with pytest.raises(WorkflowInvalid) as caught:
        parse_workflow(definition)
    assert [e["field"] for e in caught.value.errors] == ["transitions[1].to"]       # the definition's numbering
    placed = place_errors([{**e, "field": "definition." + e["field"]} for e in caught.value.errors],
                          state_rows, transition_rows)
    assert placed.transition_rows == {2: {"to": ["'old' is not a state of this workflow"]}}   # the form's row 3
    assert placed.summary == [{"anchor": "tr-2-to", "where": "Transition 3, to state",
                               "message": "'old' is not a state of this workflow"}]


def test_every_problem_is_placed_and_worded_for_people():
    errors = [{"field": "definition.transitions[1].from", "message": "is required: a non-empty text"},
              {"field": "definition.transitions[0].roles", "message": "is required: a list of roles from x"},
              {"field": "definition.transitions[1].roles[1]", "message": "must be one of designer, reviewer"},
              {"field": "definition.transitions[0].demands.approvals", "message": "must demand at least one approval"},
              {"field": "definition.transitions[1]", "message": "must be an object"},
              {"field": "definition.states[1]", "message": "'done' cannot be reached from the initial state 'open'"},
              {"field": "definition.states[0].name", "message": "'x' names another state already"},
              {"field": "definition.states", "message": "exactly one state must be initial; 2 are"},
              {"field": "definition.transitions", "message": "has more than 100 transitions"},
              {"field": "definition.on_edit", "message": "is required: a non-empty text"},
              {"field": "definition.name", "message": "is longer than 60 characters"},
              {"field": "definition", "message": "a workflow is an object"}]
    placed = place_errors(errors, state_rows=[0, 2], transition_rows=[0, 3])
    assert placed.transition_rows[3] == {"from": ["choose a state"], "roles": ["must be one of designer, reviewer"],
                                         "": ["must be an object"]}
    assert placed.transition_rows[0]["roles"][0].startswith("tick at least one role")
    assert placed.state_rows == {2: {"": ["'done' cannot be reached from the initial state 'open'"]},
                                 0: {"name": ["'x' names another state already"]}}
    assert placed.states and placed.transitions and placed.on_edit == ["choose a state"] and placed.name
    assert placed.other == ["a workflow is an object"]
    wheres = [item["where"] for item in placed.summary]
    assert wheres[:4] == ["Name of the workflow", "States", "State 1, name", "State 3"]
    assert "Transition 4, from state" in wheres and "Transition 1, approvals needed" in wheres
    assert len(placed.summary) == len(errors)
    assert not any(re.search(r"\w\[\d+\]|definition\.", item["where"] + item["anchor"]) for item in placed.summary)


def test_the_form_of_a_stored_definition_offers_empty_rows_and_picks_states_by_row():
    form = form_from_definition(_default(), version=4)
    assert len(form.states) == 4 + EXTRA_STATES and len(form.transitions) == 6 + EXTRA_TRANSITIONS
    accept = form.transitions[2]
    assert (accept.name, accept.source, accept.target) == ("accept margins", 1, 2)
    assert form.on_edit == 0 and form.version == 4
    assert form.archives is True and [s.archives for s in form.states[:4]] == [False, False, False, True]  # default
    assert all(t.blank for t in form.transitions[6:]) and all(s.blank for s in form.states[4:])


def test_the_archive_flag_gets_a_checkbox_per_state_when_the_definition_carries_it():
    """A state's ``archives`` key ("entering it archives the record"): shown and written only when the
    definition has it."""
    flagged = _default()
    for s in flagged["states"]:
        s["archives"] = s["name"] == "frozen for build"
    form = form_from_definition(flagged)
    assert form.archives is True and [s.archives for s in form.states[:4]] == [False, False, False, True]
    html = templates.get_template("admin_workflow.html").render(
        request=None, actor=None, csrf_token="t", team={"id": 1, "name": "alpha"}, version=1, updated_by="",
        definition=flagged, diagram=workflow_svg(flagged), form=form,
        state_options=[{"value": i, "label": s.name} for i, s in enumerate(form.states)],
        roles=["designer"], max_approvals=10, field_words={}, errors=place_errors([], [], []), saved=None, conflict="")
    assert 'name="has_archives" value="1"' in html
    assert re.search(r'name="state-3-archives" type="checkbox" checked', html)
    assert not re.search(r'name="state-2-archives" type="checkbox" checked', html)
    assert "archives the record" in html                                       # the column and the diagram say so
    pairs = [("state_count", "2"), ("has_archives", "1"), ("state-0-name", "a"), ("initial", "0"),
             ("state-1-name", "b"), ("state-1-signed_off", "on"), ("state-1-archives", "on")]
    definition, _, _ = definition_of(read_form(_form(pairs)))
    assert [s["archives"] for s in definition["states"]] == [False, True]
    unflagged, _, _ = definition_of(read_form(_form([p for p in pairs if p[0] != "has_archives"])))
    assert all("archives" not in s for s in unflagged["states"])


# --- the diagram ----------------------------------------------------------------------------------


def _svg(definition: dict) -> ET.Element:
    return ET.fromstring(str(workflow_svg(definition)))


def _texts(element: ET.Element) -> list[str]:
    return [t.text or "" for t in element.iter(f"{SVG}text")]


def test_the_diagram_draws_every_state_as_a_box_and_every_transition_as_a_labelled_arrow():
    root = _svg(_default())
    states = [g for g in root.iter(f"{SVG}g") if "state" in g.get("class", "").split()]
    assert [g.get("data-state") for g in states] == ["in design", "awaiting review", "margins accepted",
                                                     "frozen for build"]
    signed = [g.get("data-state") for g in states if "signed" in g.get("class", "").split()]
    assert signed == ["margins accepted", "frozen for build"]
    for g in states:        # a signed-off state has a second border and says so
        assert (len(g.findall(f"{SVG}rect")) == 2) == (g.get("data-state") in signed)
        assert ("\u2714 signed off" in " ".join(_texts(g))) == (g.get("data-state") in signed)
    assert "new rails start here" in " ".join(_texts(states[0]))
    arrows = [g for g in root.iter(f"{SVG}g") if "transition" in g.get("class", "").split()]
    assert len(arrows) == 6                              # the default's six transitions join six distinct pairs
    assert all(g.find(f"{SVG}path").get("marker-end") == "url(#wf-arrowhead)" for g in arrows)
    labels = [" ".join(_texts(g)) for g in arrows]
    for t in DEFAULT_WORKFLOW["transitions"]:
        assert any(label.startswith(t["name"]) for label in labels), t["name"]
    back = [g for g in arrows if "back" in g.get("class").split()]
    assert sorted(" ".join(_texts(g)).split(" by ")[0] for g in back) == ["reopen", "reopen", "send back"]
    start = next(g for g in root.iter(f"{SVG}g") if g.get("class") == "start")
    assert start.find(f"{SVG}circle") is not None and _texts(start) == ["start"]
    assert root.get("role") == "img" and "Transitions: submit for review: from in design to awaiting review" in \
        root.find(f"{SVG}desc").text


def test_arcs_that_would_overlap_are_drawn_at_different_heights():
    """The three ways back to 'in design' span overlapping stretches of the row: each apex lies deeper."""
    root = _svg(_default())
    back = [g for g in root.iter(f"{SVG}g") if "back" in g.get("class", "").split()]
    controls = sorted(float(re.search(r"C[\d.]+,([\d.]+)", g.find(f"{SVG}path").get("d")).group(1)) for g in back)
    assert len(set(controls)) == 3
    label_boxes = sorted((float(g.find(f"{SVG}rect").get("y")), float(g.find(f"{SVG}rect").get("height")))
                         for g in back)
    for (y1, h1), (y2, _) in zip(label_boxes, label_boxes[1:]):
        assert y1 + h1 <= y2                            # labels stacked without overlap


def test_the_diagram_puts_the_initial_state_first_then_the_definitions_order_and_escapes_names():
    wf = _default()
    wf["states"].insert(0, {"name": "on hold <parts & \"stock\">", "initial": False, "signed_off": False,
                            "description": ""})
    wf["transitions"].append({"name": "hold", "from": "awaiting review", "to": wf["states"][0]["name"],
                              "roles": ["manager"], "demands": {"approvals": 0, "checks_pass": False,
                                                                "no_stale_approvals": False}})
    assert state_order(wf) == ["in design", "on hold <parts & \"stock\">", "awaiting review", "margins accepted",
                               "frozen for build"]                  # the initial state, then the definition's order
    root = _svg(wf)                                    # parses: the name is escaped
    assert any("on hold <parts &" in t for t in _texts(root))
    assert "by manager" in " ".join(_texts(root))
    assert not re.search(r'(?:href|src)="(?!#)', str(workflow_svg(wf)))   # nothing loaded from anywhere


def test_a_state_flagged_to_archive_and_the_state_an_edit_returns_to_say_so():
    wf = _default()
    wf["states"][3]["archives"] = True
    root = _svg(wf)
    boxes = {g.get("data-state"): " ".join(_texts(g)) for g in root.iter(f"{SVG}g") if g.get("data-state")}
    assert "archives the record" in boxes["frozen for build"] and "archives" not in boxes["margins accepted"]
    assert "an edit returns here" in boxes["in design"]

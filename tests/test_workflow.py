"""The pure workflow rules: validating a definition, and what a transition demands (no database)."""

from __future__ import annotations

import copy

import pytest

from server.workflow import (DEFAULT_WORKFLOW, ApprovalFact, CheckFact, RailFacts, WaiverRules, WorkflowInvalid,
                             blockers, counted_approvers, outstanding_stale, parse_workflow, unresolved_checks,
                             waiver_covers, waiver_refusal, worse)


def _default() -> dict:
    return copy.deepcopy(DEFAULT_WORKFLOW)


def test_the_default_workflow_is_valid_and_describes_a_review():
    wf = parse_workflow(DEFAULT_WORKFLOW)
    assert wf.initial == "in design"
    assert wf.on_edit == "in design"
    assert [s.name for s in wf.states] == ["in design", "awaiting review", "margins accepted", "frozen for build"]
    assert [s.name for s in wf.states if s.signed_off] == ["margins accepted", "frozen for build"]
    accept = wf.transition("awaiting review", "accept margins")
    assert accept.roles == ("reviewer",)
    assert (accept.demands.approvals, accept.demands.checks_pass, accept.demands.no_stale_approvals) == (1, True, True)
    assert wf.transition("in design", "accept margins") is None
    assert parse_workflow(wf.as_dict()) == wf  # the stored form reads back the same


def _break(mutate):
    data = _default()
    mutate(data)
    return data


BAD = [
    ("two initial states", lambda d: d["states"][1].update(initial=True), "states", "exactly one state must be initial"),
    ("no initial state", lambda d: d["states"][0].update(initial=False), "states", "exactly one state must be initial"),
    ("duplicate name", lambda d: d["states"][2].update(name="In  Design"), "states[2].name", "names another state already"),
    ("empty name", lambda d: d["states"][1].update(name="  "), "states[1].name", "is required"),
    ("transition from a missing state", lambda d: d["transitions"][0].update({"from": "on hold"}),
     "transitions[0].from", "'on hold' is not a state"),
    ("transition to a missing state", lambda d: d["transitions"][1].update(to="scrapped"),
     "transitions[1].to", "'scrapped' is not a state"),
    ("unreachable state", lambda d: d["states"].append({"name": "parked"}), "states[4]",
     "'parked' cannot be reached"),
    ("on_edit missing", lambda d: d.update(on_edit="nowhere"), "on_edit", "is not a state"),
    ("on_edit signed off", lambda d: d.update(on_edit="margins accepted"), "on_edit", "must leave its signed-off"),
    ("unknown role", lambda d: d["transitions"][0].update(roles=["intern"]), "transitions[0].roles[0]",
     "must be one of"),
    ("viewer role", lambda d: d["transitions"][0].update(roles=["viewer"]), "transitions[0].roles[0]",
     "viewers only read"),
    ("no roles", lambda d: d["transitions"][0].update(roles=[]), "transitions[0].roles", "is required"),
    ("negative approvals", lambda d: d["transitions"][3]["demands"].update(approvals=-1),
     "transitions[3].demands.approvals", "whole number"),
    ("signing off without approval", lambda d: d["transitions"][2]["demands"].update(approvals=0),
     "transitions[2].demands.approvals", "at least one approval"),
    ("self loop", lambda d: d["transitions"][0].update(to="in design"), "transitions[0].to", "must differ"),
    ("same name twice from one state", lambda d: d["transitions"][5].update({"from": "margins accepted"}),
     "transitions[5].name", "leaves 'margins accepted' twice"),
    ("no signed-off state", lambda d: [s.update(signed_off=False) for s in d["states"]], "states",
     "at least one state must be signed off"),
    ("signed-off initial state", lambda d: d["states"][0].update(signed_off=True), "states[0].signed_off",
     "cannot be signed off"),
    ("misspelt demand", lambda d: d["transitions"][2]["demands"].update(aprovals=2),
     "transitions[2].demands.aprovals", "not a known field"),
    ("no states", lambda d: d.update(states=[]), "states", "at least one state"),
]


@pytest.mark.parametrize("label,mutate,field,words", BAD, ids=[b[0] for b in BAD])
def test_a_bad_definition_is_refused_naming_its_field(label, mutate, field, words):
    with pytest.raises(WorkflowInvalid) as caught:
        parse_workflow(_break(mutate))
    found = {e["field"]: e["message"] for e in caught.value.errors}
    assert field in found, found
    assert words in found[field]


def test_errors_name_each_entry_at_its_place_in_the_list_given():
    """Entries refused for one problem do not shift the paths of the problems found after them."""
    data = _default()
    data["states"].insert(1, {"name": "In design"})                 # a repeat: refused, not parsed
    data["states"].append({"name": "parked"})                       # unreachable, given as entry 6
    data["transitions"].insert(0, {"name": "", "from": "in design", "to": "awaiting review", "roles": ["designer"]})
    data["transitions"][3]["demands"]["approvals"] = 0              # 'accept margins', given as entry 4
    with pytest.raises(WorkflowInvalid) as caught:
        parse_workflow(data)
    found = {e["field"]: e["message"] for e in caught.value.errors}
    assert found["states[1].name"] == "'In design' names another state already"
    assert found["transitions[0].name"].startswith("is required")
    assert "'accept margins' enters the signed-off state" in found["transitions[3].demands.approvals"]
    data["states"].pop(1)
    data["transitions"].pop(0)
    data["transitions"][2]["demands"]["approvals"] = 1
    with pytest.raises(WorkflowInvalid) as caught:
        parse_workflow(data)
    assert [e["field"] for e in caught.value.errors] == ["states[4]"]


def test_not_an_object_is_refused():
    with pytest.raises(WorkflowInvalid):
        parse_workflow(["in design"])


def _facts(**kw) -> RailFacts:
    base = {"state": "awaiting review", "head_n": 3, "approvals": (), "checks": (CheckFact("startup_soa", "pass"),),
            "waived": {}}
    return RailFacts(**{**base, **kw})


def _two_approvals():
    wf = _default()
    wf["transitions"][2]["demands"]["approvals"] = 2
    return parse_workflow(wf).transition("awaiting review", "accept margins")


def test_two_approvals_demanded_one_is_not_enough():
    step = _two_approvals()
    one = _facts(approvals=(ApprovalFact(10, "rev-a", 3, False),))
    problems = blockers(step, one)
    assert [b.demand for b in problems] == ["approvals"]
    assert "needs 2 approvals of revision 3" in problems[0].message and "it has 1" in problems[0].message
    same_twice = _facts(approvals=(ApprovalFact(10, "rev-a", 3, False), ApprovalFact(10, "rev-a", 3, False)))
    assert [b.demand for b in blockers(step, same_twice)] == ["approvals"]
    two = _facts(approvals=(ApprovalFact(10, "rev-a", 3, False), ApprovalFact(11, "rev-b", 3, False)))
    assert blockers(step, two) == []


def test_approvals_of_an_older_revision_do_not_count_and_block_as_stale():
    step = parse_workflow(DEFAULT_WORKFLOW).transition("awaiting review", "accept margins")
    facts = _facts(approvals=(ApprovalFact(10, "rev-a", 2, True),))
    demands = [b.demand for b in blockers(step, facts)]
    assert demands == ["approvals", "stale_approvals"]
    renewed = _facts(approvals=(ApprovalFact(10, "rev-a", 2, True), ApprovalFact(10, "rev-a", 3, False)))
    assert blockers(step, renewed) == []
    assert outstanding_stale(renewed) == []


def test_checks_must_pass_or_be_waived_and_an_unanalysed_rail_does_not_pass():
    step = parse_workflow(DEFAULT_WORKFLOW).transition("awaiting review", "accept margins")
    approved = (ApprovalFact(10, "rev-a", 3, False),)
    not_analysed = blockers(step, _facts(approvals=approved, checks=None))
    assert [b.demand for b in not_analysed] == ["checks"] and "not been analysed" in not_analysed[0].message
    checks = (CheckFact("startup_soa", "fail"), CheckFact("fault_margin", "marginal"), CheckFact("retry", "n/a"))
    open_ = blockers(step, _facts(approvals=approved, checks=checks))
    assert "startup_soa (fail)" in open_[0].message and "fault_margin (marginal)" in open_[0].message
    partly = blockers(step, _facts(approvals=approved, checks=checks, waived={"startup_soa": "fail"}))
    assert "startup_soa" not in partly[0].message and "fault_margin" in partly[0].message
    assert blockers(step, _facts(approvals=approved, checks=checks,
                                 waived={"startup_soa": "fail", "fault_margin": "marginal"})) == []


def test_a_waiver_covers_a_check_only_while_it_reads_no_worse_than_the_verdict_waived():
    step = parse_workflow(DEFAULT_WORKFLOW).transition("awaiting review", "accept margins")
    approved = (ApprovalFact(10, "rev-a", 3, False),)
    marginal_waived = {"fault_margin": "marginal"}
    still = _facts(approvals=approved, checks=(CheckFact("fault_margin", "marginal"),), waived=marginal_waived)
    assert blockers(step, still) == []
    now_fails = _facts(approvals=approved, checks=(CheckFact("fault_margin", "fail"),), waived=marginal_waived)
    assert [c.id for c in unresolved_checks(now_fails)] == ["fault_margin"]
    assert "fault_margin (fail)" in blockers(step, now_fails)[0].message
    # one corner marginal, another failing: the failing reading is not covered
    mixed = _facts(approvals=approved, checks=(CheckFact("fault_margin", "marginal"), CheckFact("fault_margin", "fail")),
                   waived=marginal_waived)
    assert [(c.id, c.verdict) for c in unresolved_checks(mixed)] == [("fault_margin", "fail")]
    fail_waived = _facts(approvals=approved, checks=(CheckFact("fault_margin", "marginal"),),
                         waived={"fault_margin": "fail"})
    assert unresolved_checks(fail_waived) == []
    assert [worse(a, b) for a, b in (("fail", "marginal"), ("marginal", "pass"), ("pass", "n/a"), ("pass", "pass"),
                                     ("n/a", "fail"))] == [True, True, True, False, False]
    assert waiver_covers("marginal", "marginal") and not waiver_covers("marginal", "fail")


def test_a_transition_from_another_state_is_blocked():
    step = parse_workflow(DEFAULT_WORKFLOW).transition("in design", "submit for review")
    assert [b.demand for b in blockers(step, _facts())] == ["state"]
    assert blockers(step, _facts(state="in design")) == []


def test_the_default_waiver_rules_let_reviewers_waive_marginal_checks_only():
    rules = WaiverRules()
    assert (rules.two_person, rules.fail_waiver_role) == (True, None)
    assert waiver_refusal(rules, "reviewer", "marginal") is None
    assert "past the physical edge" in waiver_refusal(rules, "reviewer", "fail")
    assert waiver_refusal(rules, "manager", "marginal") is not None
    assert "only failing or marginal" in waiver_refusal(rules, "reviewer", "pass")
    named = WaiverRules(fail_waiver_role="manager")
    assert waiver_refusal(named, "manager", "fail") is None
    assert "only the manager role" in waiver_refusal(named, "reviewer", "fail")


def test_under_the_two_person_rule_the_waivers_author_does_not_count_as_an_approver():
    wf = parse_workflow(DEFAULT_WORKFLOW)
    accept = wf.transition("awaiting review", "accept margins")
    approvals = (ApprovalFact(7, "ravi", 2, False),)
    checks = (CheckFact("timer_startup", "marginal"),)
    facts = RailFacts(state="awaiting review", head_n=2, approvals=approvals, checks=checks,
                      waived={"timer_startup": "marginal"}, waivers_by=frozenset({7}), two_person=True)
    assert counted_approvers(facts) == ([], ["ravi"])
    found = blockers(accept, facts)
    assert [b.demand for b in found] == ["approvals"] and "ravi waived a check" in found[0].message
    off = RailFacts(state="awaiting review", head_n=2, approvals=approvals, checks=checks,
                    waived={"timer_startup": "marginal"}, waivers_by=frozenset({7}), two_person=False)
    assert counted_approvers(off) == (["ravi"], []) and blockers(accept, off) == []

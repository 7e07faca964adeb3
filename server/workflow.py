"""Team workflows: validating a definition, and what taking a transition demands.

Pure: no database, no web. Provides

- :data:`DEFAULT_WORKFLOW`: the shipped starting point, a plain definition dict;
- :func:`parse_workflow`: validate a definition (raises :class:`WorkflowInvalid` naming every
  problem with its field path) and return a :class:`WorkflowDef`;
- :class:`RailFacts`, :class:`ApprovalFact`, :class:`CheckFact`: what the caller knows about a
  rail when a transition is tried;
- :func:`blockers`: the unmet demands of a transition for those facts (empty: it may be taken);
- :data:`SEVERITY`, :func:`worse`, :func:`waiver_covers`: how verdicts rank, and when a waiver
  still covers a check (while the check reads no worse than the verdict waived);
- :class:`WaiverRules`, :func:`waiver_refusal`, :func:`two_person_refusal`: a team's waiver rules
  (two-person rule, who may waive a failing check) and what they refuse.

A definition::

    {"name": "...",
     "states": [{"name": "in design", "initial": true, "signed_off": false, "archives": false,
                 "description": ""}, ...],
     "transitions": [{"name": "submit for review", "from": "in design", "to": "awaiting review",
                      "roles": ["designer"],
                      "demands": {"approvals": 0, "checks_pass": false, "no_stale_approvals": false}}],
     "on_edit": "in design"}

``on_edit`` is the state a rail goes back to when it gets a new revision. A state marked
``signed_off`` counts as signed off in the managers' risk view. A state marked ``archives``
("archives the record") is a signed-off state whose entry archives the board's sign-off report:
once every rail of a board stands in such a state, the report is kept as it reads then, unchangeable.
"""

from __future__ import annotations

from collections import deque
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

from server.analysis.bounds import text_problem

__all__ = ["ROLES", "TRANSITION_ROLES", "DEFAULT_WORKFLOW", "WorkflowInvalid", "State", "Demands", "Transition",
           "WorkflowDef", "parse_workflow", "ApprovalFact", "CheckFact", "RailFacts", "Blocker", "blockers",
           "current_approvers", "counted_approvers", "outstanding_stale", "unresolved_checks", "SEVERITY", "worse",
           "waiver_covers", "WaiverRules", "FAIL_WAIVER_ROLES", "waiver_refusal", "two_person_refusal"]

ROLES = ("viewer", "designer", "reviewer", "manager", "admin")
TRANSITION_ROLES = ROLES[1:]          # viewers only read
NAME_MAX = 60
MAX_STATES = 30
MAX_TRANSITIONS = 100
MAX_APPROVALS = 10
PROBLEM_VERDICTS = ("fail", "marginal")
# How bad a verdict is: fail > marginal > pass > n/a (an unknown word ranks as a fail: conservative).
SEVERITY = {"n/a": 0, "pass": 1, "marginal": 2, "fail": 3}


def worse(verdict: str | None, than: str | None) -> bool:
    """Whether ``verdict`` is more severe than ``than``."""
    return SEVERITY.get(str(verdict), 3) > SEVERITY.get(str(than), 3)


def waiver_covers(waived_verdict: str | None, current_verdict: str | None) -> bool:
    """A waiver covers a check while the check reads no worse than the verdict it waived (a verdict
    word the waiver does not know covers nothing)."""
    return waived_verdict in SEVERITY and not worse(current_verdict, waived_verdict)

# Roles a team may name as allowed to waive a failing check (past the physical edge); nobody by default.
FAIL_WAIVER_ROLES = ("reviewer", "manager")


@dataclass(frozen=True)
class WaiverRules:
    """A team's waiver rules. Defaults are the safe ones.

    ``two_person``: an approval of a revision that relies on a waiver must come from another
    reviewer than the one who granted that waiver. ``fail_waiver_role``: the one role whose
    members may waive a failing check (a reading past the physical edge: SOA ratio below 1, Tj
    above Tj max, a start that cannot complete, a current beyond its rating); None: nobody.
    A marginal check (between the team's limit and the physical edge) is waived by reviewers.
    """

    two_person: bool = True
    fail_waiver_role: str | None = None

    def as_dict(self) -> dict[str, Any]:
        return {"two_person": self.two_person, "fail_waiver_role": self.fail_waiver_role}


def waiver_refusal(rules: WaiverRules, role: str, verdict: str | None) -> str | None:
    """Why a person of ``role`` may not waive a check reading ``verdict`` (None: they may).

    The verdict is the stored check record's own: a fail is past the physical edge, whatever
    the label of the check's limit.
    """
    if verdict == "fail":
        if rules.fail_waiver_role is None:
            return ("the check fails: its reading is past the physical edge, and this team's rules let nobody "
                    "waive a failing check; change the design, or an admin names a role that may")
        if role != rules.fail_waiver_role:
            return (f"the check fails: its reading is past the physical edge, and this team's rules let only the "
                    f"{rules.fail_waiver_role} role waive a failing check; your role is {role}")
        return None
    if verdict == "marginal":
        return None if role == "reviewer" or role == rules.fail_waiver_role else \
            f"marginal checks are waived by reviewers; your role is {role}"
    return f"only failing or marginal checks are waived; this one is {verdict}"


def two_person_refusal(rules: WaiverRules, *, approving: bool, revision_n: int) -> str:
    """The message of the two-person rule (approving after waiving, or waiving after approving)."""
    if approving:
        return (f"you waived a check of revision {revision_n}: under this team's two-person rule another reviewer "
                "approves the revision that relies on your waiver")
    return (f"you approved revision {revision_n}: under this team's two-person rule another reviewer grants the "
            "waivers your approval would rely on")


DEFAULT_WORKFLOW: dict[str, Any] = {
    "name": "margin review",
    "states": [
        {"name": "in design", "initial": True, "signed_off": False, "archives": False,
         "description": "the designer is still changing the rail"},
        {"name": "awaiting review", "initial": False, "signed_off": False, "archives": False,
         "description": "the designer asks a reviewer to check the margins of the current revision"},
        {"name": "margins accepted", "initial": False, "signed_off": True, "archives": False,
         "description": "a reviewer approved this revision; every check passes or has a waiver"},
        {"name": "frozen for build", "initial": False, "signed_off": True, "archives": True,
         "description": "the accepted revision is the one the board is built with"},
    ],
    "transitions": [
        {"name": "submit for review", "from": "in design", "to": "awaiting review",
         "roles": ["designer", "admin"],
         "demands": {"approvals": 0, "checks_pass": False, "no_stale_approvals": False}},
        {"name": "send back", "from": "awaiting review", "to": "in design",
         "roles": ["designer", "reviewer", "admin"],
         "demands": {"approvals": 0, "checks_pass": False, "no_stale_approvals": False}},
        {"name": "accept margins", "from": "awaiting review", "to": "margins accepted",
         "roles": ["reviewer"],
         "demands": {"approvals": 1, "checks_pass": True, "no_stale_approvals": True}},
        {"name": "freeze for build", "from": "margins accepted", "to": "frozen for build",
         "roles": ["manager"],
         "demands": {"approvals": 1, "checks_pass": True, "no_stale_approvals": True}},
        {"name": "reopen", "from": "margins accepted", "to": "in design",
         "roles": ["designer", "reviewer", "manager", "admin"],
         "demands": {"approvals": 0, "checks_pass": False, "no_stale_approvals": False}},
        {"name": "reopen", "from": "frozen for build", "to": "in design",
         "roles": ["reviewer", "manager", "admin"],
         "demands": {"approvals": 0, "checks_pass": False, "no_stale_approvals": False}},
    ],
    "on_edit": "in design",
}


class WorkflowInvalid(ValueError):
    """A definition that cannot be used; ``errors`` is a list of {field, message}."""

    def __init__(self, errors: list[dict[str, str]]) -> None:
        self.errors = errors
        super().__init__("the workflow is not valid: " + "; ".join(f"{e['field']}: {e['message']}"
                                                                   for e in errors[:5]))


@dataclass(frozen=True)
class State:
    name: str
    initial: bool = False
    signed_off: bool = False
    description: str = ""
    archives: bool = False       # entering it archives the record (the board's sign-off report)


@dataclass(frozen=True)
class Demands:
    approvals: int = 0                 # approvals of the current revision by distinct reviewers
    checks_pass: bool = False          # every check passes, or fails / is marginal with a waiver
    no_stale_approvals: bool = False   # nobody's approval of an earlier revision is left unrenewed


@dataclass(frozen=True)
class Transition:
    name: str
    source: str
    target: str
    roles: tuple[str, ...]
    demands: Demands = field(default_factory=Demands)

    def allows(self, role: str) -> bool:
        return role in self.roles


@dataclass(frozen=True)
class WorkflowDef:
    name: str
    states: tuple[State, ...]
    transitions: tuple[Transition, ...]
    on_edit: str

    @property
    def initial(self) -> str:
        return next(s.name for s in self.states if s.initial)

    def state(self, name: str) -> State | None:
        return next((s for s in self.states if s.name == name), None)

    def has_state(self, name: str) -> bool:
        return self.state(name) is not None

    def is_signed_off(self, name: str) -> bool:
        state = self.state(name)
        return bool(state and state.signed_off)

    def archives(self, name: str) -> bool:
        """Whether entering the state ``name`` archives the record."""
        state = self.state(name)
        return bool(state and state.archives)

    def transitions_from(self, name: str) -> list[Transition]:
        return [t for t in self.transitions if t.source == name]

    def transition(self, source: str, name: str) -> Transition | None:
        return next((t for t in self.transitions if t.source == source and t.name == name), None)

    def as_dict(self) -> dict[str, Any]:
        return {
            "name": self.name,
            "states": [{"name": s.name, "initial": s.initial, "signed_off": s.signed_off, "archives": s.archives,
                        "description": s.description} for s in self.states],
            "transitions": [{"name": t.name, "from": t.source, "to": t.target, "roles": list(t.roles),
                             "demands": {"approvals": t.demands.approvals, "checks_pass": t.demands.checks_pass,
                                         "no_stale_approvals": t.demands.no_stale_approvals}}
                            for t in self.transitions],
            "on_edit": self.on_edit,
        }


# --- validation ---------------------------------------------------------------------------


class _Errors:
    def __init__(self) -> None:
        self.items: list[dict[str, str]] = []

    def add(self, path: str, message: str) -> None:
        self.items.append({"field": path, "message": message})


def _name(value: Any, path: str, errors: _Errors) -> str | None:
    if not isinstance(value, str) or not value.strip():
        errors.add(path, "is required: a non-empty text")
        return None
    name = " ".join(value.split())
    if len(name) > NAME_MAX:
        errors.add(path, f"is longer than {NAME_MAX} characters")
        return None
    if (problem := text_problem(name)) is not None:
        errors.add(path, problem)
        return None
    return name


def _flag(value: Any, path: str, errors: _Errors) -> bool:
    if value is None:
        return False
    if not isinstance(value, bool):
        errors.add(path, "must be true or false")
        return False
    return value


def _unknown_keys(data: dict, allowed: set[str], path: str, errors: _Errors) -> None:
    for key in data:
        if key not in allowed:
            errors.add(f"{path}.{key}" if path else str(key), "is not a known field")


def _parse_states(raw: Any, errors: _Errors) -> list[State]:
    if not isinstance(raw, list) or not raw:
        errors.add("states", "is required: a list of at least one state")
        return []
    if len(raw) > MAX_STATES:
        errors.add("states", f"has more than {MAX_STATES} states")
    states: list[State] = []
    seen: dict[str, int] = {}
    for k, item in enumerate(raw):
        path = f"states[{k}]"
        if not isinstance(item, dict):
            errors.add(path, "must be an object with a name")
            continue
        _unknown_keys(item, {"name", "initial", "signed_off", "archives", "description"}, path, errors)
        name = _name(item.get("name"), f"{path}.name", errors)
        initial = _flag(item.get("initial"), f"{path}.initial", errors)
        signed_off = _flag(item.get("signed_off"), f"{path}.signed_off", errors)
        archives = _flag(item.get("archives"), f"{path}.archives", errors)
        if archives and not signed_off:
            errors.add(f"{path}.archives", "only a signed-off state archives the record: mark it signed off too")
        description = item.get("description") or ""
        if not isinstance(description, str):
            errors.add(f"{path}.description", "must be text")
            description = ""
        elif (problem := text_problem(description, one_line=False)) is not None:
            errors.add(f"{path}.description", problem)
            description = ""
        if name is None:
            continue
        if name.casefold() in seen:
            errors.add(f"{path}.name", f"'{name}' names another state already")
            continue
        seen[name.casefold()] = k
        states.append(State(name=name, initial=initial, signed_off=signed_off, description=description[:500],
                            archives=archives))
    return states


def _parse_demands(raw: Any, path: str, errors: _Errors) -> Demands:
    if raw is None:
        return Demands()
    if not isinstance(raw, dict):
        errors.add(path, "must be an object")
        return Demands()
    _unknown_keys(raw, {"approvals", "checks_pass", "no_stale_approvals"}, path, errors)
    approvals = raw.get("approvals", 0)
    if isinstance(approvals, bool) or not isinstance(approvals, int) or not 0 <= approvals <= MAX_APPROVALS:
        errors.add(f"{path}.approvals", f"must be a whole number from 0 to {MAX_APPROVALS}")
        approvals = 0
    return Demands(approvals=approvals, checks_pass=_flag(raw.get("checks_pass"), f"{path}.checks_pass", errors),
                   no_stale_approvals=_flag(raw.get("no_stale_approvals"), f"{path}.no_stale_approvals", errors))


def _parse_transitions(raw: Any, names: set[str], errors: _Errors) -> list[tuple[int, Transition]]:
    """The valid transitions, each with its index in ``raw`` (the index error paths name)."""
    if raw is None:
        raw = []
    if not isinstance(raw, list):
        errors.add("transitions", "must be a list")
        return []
    if len(raw) > MAX_TRANSITIONS:
        errors.add("transitions", f"has more than {MAX_TRANSITIONS} transitions")
    out: list[tuple[int, Transition]] = []
    seen: set[tuple[str, str]] = set()
    for k, item in enumerate(raw):
        path = f"transitions[{k}]"
        if not isinstance(item, dict):
            errors.add(path, "must be an object with name, from, to and roles")
            continue
        _unknown_keys(item, {"name", "from", "to", "roles", "demands"}, path, errors)
        name = _name(item.get("name"), f"{path}.name", errors)
        source = _name(item.get("from"), f"{path}.from", errors)
        target = _name(item.get("to"), f"{path}.to", errors)
        for end, value in (("from", source), ("to", target)):
            if value is not None and value not in names:
                errors.add(f"{path}.{end}", f"'{value}' is not a state of this workflow")
        if source is not None and source == target:
            errors.add(f"{path}.to", "must differ from the state it leaves: a transition changes the state")
        roles = item.get("roles")
        if not isinstance(roles, list) or not roles:
            errors.add(f"{path}.roles", f"is required: a list of roles from {', '.join(TRANSITION_ROLES)}")
            roles = []
        for j, role in enumerate(roles):
            if role not in TRANSITION_ROLES:
                errors.add(f"{path}.roles[{j}]", f"must be one of {', '.join(TRANSITION_ROLES)} "
                                                 "(viewers only read)")
        demands = _parse_demands(item.get("demands"), f"{path}.demands", errors)
        if name is None or source is None or target is None:
            continue
        if (source, name.casefold()) in seen:
            errors.add(f"{path}.name", f"'{name}' leaves '{source}' twice: names must differ per state")
            continue
        seen.add((source, name.casefold()))
        out.append((k, Transition(name=name, source=source, target=target,
                                  roles=tuple(dict.fromkeys(r for r in roles if r in TRANSITION_ROLES)),
                                  demands=demands)))
    return out


def _unreachable(initial: str, states: list[State], transitions: list[Transition]) -> list[str]:
    reached = {initial}
    queue = deque([initial])
    while queue:
        here = queue.popleft()
        for t in transitions:
            if t.source == here and t.target not in reached:
                reached.add(t.target)
                queue.append(t.target)
    return [s.name for s in states if s.name not in reached]


def _raw_index(raw: list, name: str) -> int:
    """Index in the given list of the state that parsed as ``name`` (the first of that name: a later
    one is refused as a repeat), so that an error names the entry as it was given."""
    return next(k for k, item in enumerate(raw) if isinstance(item, dict) and isinstance(item.get("name"), str)
                and " ".join(item["name"].split()) == name)


def parse_workflow(data: Any) -> WorkflowDef:
    """Validate a workflow definition; raises :class:`WorkflowInvalid` listing every problem.

    Rules: unique state names (ignoring case and repeated spaces); exactly one initial state,
    which is not signed off; at least one signed-off state; a state that archives the record is
    signed off; transitions only between states
    that exist, to a different state, taken by named roles (not viewers), with names unique
    among the transitions leaving one state; every state reachable from the initial one;
    ``on_edit`` names a state that is not signed off; a transition that enters a signed-off
    state from one that is not demands at least one approval (nobody signs off alone).
    """
    errors = _Errors()
    if not isinstance(data, dict):
        raise WorkflowInvalid([{"field": "", "message": "a workflow is an object with states and transitions"}])
    _unknown_keys(data, {"name", "states", "transitions", "on_edit"}, "", errors)
    name = _name(data.get("name") or "workflow", "name", errors) or "workflow"
    states = _parse_states(data.get("states"), errors)
    names = {s.name for s in states}
    indexed = _parse_transitions(data.get("transitions"), names, errors)
    transitions = [t for _, t in indexed]
    initials = [s for s in states if s.initial]
    if states and len(initials) != 1:
        errors.add("states", f"exactly one state must be initial; {len(initials)} are")
    for s in states:
        if s.initial and s.signed_off:
            errors.add(f"states[{_raw_index(data['states'], s.name)}].signed_off",
                       f"the initial state '{s.name}' cannot be signed off: new rails start there")
    if states and not any(s.signed_off for s in states):
        errors.add("states", "at least one state must be signed off (what the risk view counts as signed off)")
    on_edit = _name(data.get("on_edit"), "on_edit", errors)
    if on_edit is not None and states:
        if on_edit not in names:
            errors.add("on_edit", f"'{on_edit}' is not a state of this workflow")
        elif any(s.name == on_edit and s.signed_off for s in states):
            errors.add("on_edit", f"'{on_edit}' is signed off: an edited rail must leave its signed-off state")
    signed = {s.name for s in states if s.signed_off}
    for k, t in indexed:
        if t.target in signed and t.source not in signed and t.demands.approvals < 1:
            errors.add(f"transitions[{k}].demands.approvals",
                       f"'{t.name}' enters the signed-off state '{t.target}': it must demand at least one approval")
    if len(initials) == 1 and not errors.items:
        lost = set(_unreachable(initials[0].name, states, transitions))
        for s in states:
            if s.name in lost:
                errors.add(f"states[{_raw_index(data['states'], s.name)}]",
                           f"'{s.name}' cannot be reached from the initial state '{initials[0].name}': "
                           "no transition leads to it")
    if errors.items:
        raise WorkflowInvalid(errors.items)
    return WorkflowDef(name=name, states=tuple(states), transitions=tuple(transitions), on_edit=on_edit or "")


# --- taking a transition ------------------------------------------------------------------


@dataclass(frozen=True)
class ApprovalFact:
    reviewer_id: int
    reviewer_name: str
    revision_n: int
    stale: bool


@dataclass(frozen=True)
class CheckFact:
    id: str
    verdict: str
    title: str = ""  # the check's title in words, from its stored record


@dataclass(frozen=True)
class RailFacts:
    """What is known about a rail when a transition is tried.

    ``checks`` is None when the current revision has not been analysed; ``waived`` maps the id
    of each check waived for the current revision to the verdict its waiver accepted;
    ``waivers_by`` holds the ids of the reviewers whose waivers of the current revision cover a
    check; with ``two_person`` their approvals of the current revision do not count.
    """

    state: str
    head_n: int
    approvals: tuple[ApprovalFact, ...] = ()
    checks: tuple[CheckFact, ...] | None = None
    waived: Mapping[str, str] = field(default_factory=dict)
    waivers_by: frozenset[int] = frozenset()
    two_person: bool = False


@dataclass(frozen=True)
class Blocker:
    demand: str
    message: str

    def as_dict(self) -> dict[str, str]:
        return {"field": self.demand, "message": self.message}


def current_approvers(facts: RailFacts) -> list[str]:
    """Names of the reviewers who approved the current revision (each once)."""
    names = {a.reviewer_id: a.reviewer_name for a in facts.approvals if a.revision_n == facts.head_n and not a.stale}
    return [names[k] for k in sorted(names)]


def counted_approvers(facts: RailFacts) -> tuple[list[str], list[str]]:
    """(reviewers whose approval of the current revision counts, those whose does not: under the
    two-person rule, an approval by a reviewer who waived a check of the revision)."""
    names = {a.reviewer_id: a.reviewer_name for a in facts.approvals if a.revision_n == facts.head_n and not a.stale}
    barred = facts.waivers_by if facts.two_person else frozenset()
    return ([names[k] for k in sorted(names) if k not in barred], [names[k] for k in sorted(names) if k in barred])


def outstanding_stale(facts: RailFacts) -> list[ApprovalFact]:
    """Stale approvals whose reviewer has not approved the current revision."""
    renewed = {a.reviewer_id for a in facts.approvals if a.revision_n == facts.head_n and not a.stale}
    latest: dict[int, ApprovalFact] = {}
    for a in facts.approvals:
        if a.stale and a.reviewer_id not in renewed:
            if a.reviewer_id not in latest or a.revision_n > latest[a.reviewer_id].revision_n:
                latest[a.reviewer_id] = a
    return [latest[k] for k in sorted(latest)]


def unresolved_checks(facts: RailFacts) -> list[CheckFact]:
    """Failing or marginal checks of the current revision that no waiver covers (empty if not analysed).

    A waiver of a marginal check does not cover the same check once it fails.
    """
    if facts.checks is None:
        return []
    seen: dict[str, CheckFact] = {}
    for c in facts.checks:
        covered = c.id in facts.waived and waiver_covers(facts.waived[c.id], c.verdict)
        if c.verdict in PROBLEM_VERDICTS and not covered and c.id not in seen:
            seen[c.id] = c
    return list(seen.values())


def blockers(transition: Transition, facts: RailFacts) -> list[Blocker]:
    """The demands of ``transition`` that ``facts`` do not meet, each with a plain message."""
    out: list[Blocker] = []
    if transition.source != facts.state:
        out.append(Blocker("state", f"'{transition.name}' leaves '{transition.source}', "
                                    f"but the rail is in '{facts.state}'"))
        return out
    need = transition.demands.approvals
    have, barred = counted_approvers(facts)
    if len(have) < need:
        note = (f" ({', '.join(barred)} waived a check of it: under the two-person rule another reviewer "
                "approves)") if barred else ""
        out.append(Blocker("approvals", f"needs {need} approval{'s' if need != 1 else ''} of revision "
                                        f"{facts.head_n} by reviewers; it has {len(have)}{note}"))
    if transition.demands.checks_pass:
        if facts.checks is None:
            out.append(Blocker("checks", f"revision {facts.head_n} has not been analysed at the current engine "
                                        "version: analyse it first"))
        else:
            open_checks = unresolved_checks(facts)
            if open_checks:
                listed = ", ".join(f"{c.title or c.id} ({c.verdict})" for c in open_checks)
                out.append(Blocker("checks", f"checks failing or marginal without a waiver: {listed}"))
    if transition.demands.no_stale_approvals:
        stale = outstanding_stale(facts)
        if stale:
            listed = ", ".join(f"{a.reviewer_name} (revision {a.revision_n})" for a in stale)
            out.append(Blocker("stale_approvals", f"approvals of earlier revisions are not renewed: {listed}; "
                                                  f"they must approve revision {facts.head_n} again"))
    return out

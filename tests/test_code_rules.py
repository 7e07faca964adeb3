"""Rules of the code that DEVELOPERS.md states, checked on the code itself.

- No import inside a function outside the analysis core: an import that has to hide inside a
  function hides a cycle (the import contracts forbid cycles; this keeps them in plain sight).
- The shapes of the public service functions ("Services" in DEVELOPERS.md): a function that
  commits is keyword-only and takes the actor, except where nobody acts; a function that
  takes the session and the actor positionally runs inside its caller's transaction and
  never commits.
"""

from __future__ import annotations

import ast
import importlib
import inspect
import pkgutil
from pathlib import Path

import server.services

REPO = Path(__file__).resolve().parent.parent
SERVER = REPO / "server"

# Public service functions that commit without an actor, and why (DEVELOPERS.md, "Services").
COMMIT_WITHOUT_ACTOR = {
    "logins.log_in": "nobody is logged in yet",
    "users.note_token_use": "a usage stamp during authentication: nobody acts yet",
}
# The worker's protocol: a session and the claim a worker holds, positionally; the worker acts as the system.
WORKER_PROTOCOL = {"jobs.claim_next", "jobs.heartbeat", "jobs.finish", "jobs.fail", "jobs.supersede",
                   "sequences.finish_job"}


def _imports_inside_functions(path: Path, root: Path = REPO) -> list[str]:
    """``file:line in function(): import ...`` for each import statement inside a function body."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    return [f"{path.relative_to(root)}:{node.lineno} in {fn.name}(): {ast.unparse(node)}"
            for fn in ast.walk(tree) if isinstance(fn, (ast.FunctionDef, ast.AsyncFunctionDef))
            for node in ast.walk(fn) if isinstance(node, (ast.Import, ast.ImportFrom))]


def test_no_module_outside_the_analysis_core_imports_inside_a_function():
    files = [p for p in SERVER.rglob("*.py") if "analysis" not in p.relative_to(SERVER).parts]
    assert len(files) > 50
    found = [hit for path in sorted(files) for hit in _imports_inside_functions(path)]
    assert found == []


def test_the_scan_finds_an_import_inside_a_function(tmp_path):
    sample = tmp_path / "sample.py"
    sample.write_text("import json\n\n\ndef f():\n    from server import jobs\n    return jobs\n")
    assert _imports_inside_functions(sample, tmp_path) == ["sample.py:5 in f(): from server import jobs"]


def _public_service_functions():
    for info in pkgutil.iter_modules(server.services.__path__):
        module = importlib.import_module(f"server.services.{info.name}")
        for name in module.__all__:
            obj = getattr(module, name)
            if inspect.isfunction(obj):
                yield f"{info.name}.{name}", obj


def _keyword_only(params, name: str) -> bool:
    return name in params and params[name].kind is inspect.Parameter.KEYWORD_ONLY


def test_service_functions_that_commit_are_keyword_only_and_take_the_actor():
    committing = {}
    for qualname, fn in _public_service_functions():
        if ".commit()" in inspect.getsource(fn):
            committing[qualname] = inspect.signature(fn).parameters
    assert len(committing) > 30
    assert WORKER_PROTOCOL <= set(committing) and set(COMMIT_WITHOUT_ACTOR) <= set(committing)
    wrong = [q for q, params in committing.items() if q not in WORKER_PROTOCOL and not (
        _keyword_only(params, "session") and (_keyword_only(params, "actor") or q in COMMIT_WITHOUT_ACTOR))]
    assert wrong == []
    assert not any("actor" in committing[q] for q in COMMIT_WITHOUT_ACTOR)


def test_service_steps_that_take_the_actor_positionally_never_commit():
    steps = {q: fn for q, fn in _public_service_functions()
             if {"session", "actor"} <= set(inspect.signature(fn).parameters)
             and not _keyword_only(inspect.signature(fn).parameters, "actor")}
    assert {"signoff.on_new_revision", "jobs.enqueue_for_revision", "teams.join_teams", "audit.record"} <= set(steps)
    assert [q for q, fn in steps.items() if ".commit()" in inspect.getsource(fn)] == []
    writes = {q for q in steps if q != "engine_change.outdated_heads"}   # the one read among them
    assert [q for q in writes if "caller" not in (steps[q].__doc__ or "")] == []

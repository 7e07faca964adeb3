"""Every route of the app, taken from its own route table, times each role and no login.

A new route must get a line in ROUTES (method, path, the least permission it needs); a route
without one fails ``test_every_route_has_an_expectation``. The permissions of each role are
those of ``server.services.access.ROLE_PERMISSIONS``. Path parameters are filled with an id
that names nothing, so an allowed request may answer 404 or 422 but never asks for a login
(401, or a redirect to /login) or refuses the role (403), and nothing is changed.
"""

from __future__ import annotations

import fastapi.routing
import pytest
from starlette.routing import Mount

from server.services.access import ROLE_PERMISSIONS, Permission as P

PUBLIC = "public"   # no login needed
# Routes whose service decides by role and team rules rather than by one permission: the roles let through.
WAIVE = "waive"     # reviewers; managers where a team names them for failing checks
ASSIGN = "assign"   # reviewers take reviews for themselves; managers and admins assign them
LET_THROUGH = {WAIVE: {"reviewer", "manager"}, ASSIGN: {"reviewer", "manager", "admin"}}

ROUTES: list[tuple[str, str, str]] = [
    # method  path                                                  least permission
    ("GET",    "/healthz",                                          PUBLIC),
    ("GET",    "/openapi.json",                                     PUBLIC),
    ("GET",    "/docs",                                             PUBLIC),
    ("GET",    "/docs/oauth2-redirect",                             PUBLIC),
    ("GET",    "/static/docs",                                      PUBLIC),
    ("GET",    "/static",                                           PUBLIC),
    ("GET",    "/static/h/{name}",                                  PUBLIC),
    ("GET",    "/login",                                            PUBLIC),
    ("POST",   "/login",                                            PUBLIC),
    ("POST",   "/logout",                                           P.READ),
    ("GET",    "/",                                                 P.READ),
    ("GET",    "/account",                                          P.READ),
    ("POST",   "/account/tokens",                                   P.READ),
    ("POST",   "/account/tokens/{token_id}/revoke",                 P.READ),
    ("POST",   "/account/password",                                 P.READ),
    ("GET",    "/products/{product_id}",                            P.READ),
    ("GET",    "/products/new",                                     P.EDIT),
    ("POST",   "/products/new",                                     P.EDIT),
    ("GET",    "/products/{product_id}/edit",                       P.EDIT),
    ("POST",   "/products/{product_id}/edit",                       P.EDIT),
    ("GET",    "/products/{product_id}/boards/new",                 P.EDIT),
    ("POST",   "/products/{product_id}/boards/new",                 P.EDIT),
    ("GET",    "/boards/{board_id}/edit",                           P.EDIT),
    ("POST",   "/boards/{board_id}/edit",                           P.EDIT),
    ("GET",    "/products/{product_id}/import",                     P.EDIT),
    ("POST",   "/products/{product_id}/import",                     P.EDIT),
    ("GET",    "/rail-table-template.csv",                          P.READ),
    ("GET",    "/boards/{board_id}",                                P.READ),
    ("GET",    "/boards/{board_id}/sequence.csv",                   P.READ),
    ("GET",    "/boards/{board_id}/events",                         P.READ),
    ("GET",    "/rails/{rail_id}/events",                           P.READ),
    ("POST",   "/boards/{board_id}/analyses",                       P.ANALYZE),
    ("POST",   "/boards/{board_id}/sequence",                       P.EDIT),
    ("POST",   "/boards/{board_id}/sequence/approvals",             P.REVIEW),
    ("POST",   "/boards/{board_id}/sequence/waivers",               WAIVE),
    ("POST",   "/boards/{board_id}/sequence/transitions",           P.ADVANCE),
    ("GET",    "/boards/{board_id}/report",                         P.READ),
    ("GET",    "/boards/{board_id}/report.pdf",                     P.READ),
    ("GET",    "/boards/{board_id}/archived-reports",               P.READ),
    ("GET",    "/archived-reports/{archive_id}.pdf",                P.READ),
    ("GET",    "/boards/{board_id}/rails/new",                      P.EDIT),
    ("POST",   "/boards/{board_id}/rails/new",                      P.EDIT),
    ("GET",    "/rails/{rail_id}",                                  P.READ),
    ("POST",   "/rails/{rail_id}/analyses",                         P.ANALYZE),
    ("POST",   "/rails/{rail_id}/monte-carlo",                      P.ANALYZE),
    ("GET",    "/rails/{rail_id}/edit",                             P.EDIT),
    ("POST",   "/rails/{rail_id}/edit",                             P.EDIT),
    ("GET",    "/rails/{rail_id}/history",                          P.READ),
    ("GET",    "/rails/{rail_id}/revisions/{n}",                    P.READ),
    ("GET",    "/parts",                                            P.READ),
    ("POST",   "/rails/{rail_id}/approvals",                        P.REVIEW),
    ("POST",   "/rails/{rail_id}/waivers",                          WAIVE),
    ("POST",   "/rails/{rail_id}/waivers/{waiver_id}/carry",        WAIVE),
    ("POST",   "/rails/{rail_id}/retire",                           P.EDIT),
    ("POST",   "/rails/{rail_id}/restore",                          P.EDIT),
    ("POST",   "/rails/{rail_id}/assignments",                      ASSIGN),
    ("POST",   "/boards/{board_id}/assignments",                    ASSIGN),
    ("POST",   "/review-assignments/{assignment_id}/delete",        ASSIGN),
    ("POST",   "/rails/{rail_id}/transitions",                      P.ADVANCE),
    ("GET",    "/risks",                                            P.RISK),
    ("GET",    "/risks.csv",                                        P.RISK),
    ("GET",    "/products/{product_id}/risks",                      P.RISK),
    ("GET",    "/parts/new",                                        P.EDIT),
    ("POST",   "/parts/new",                                        P.EDIT),
    ("GET",    "/parts/{part_id}",                                  P.READ),
    ("GET",    "/parts/{part_id}/edit",                             P.EDIT),
    ("POST",   "/parts/{part_id}/edit",                             P.EDIT),
    ("GET",    "/admin/workflows",                                  P.ADMIN),
    ("GET",    "/admin/teams/{team_id}/workflow",                   P.ADMIN),
    ("POST",   "/admin/teams/{team_id}/workflow",                   P.ADMIN),
    ("GET",    "/admin/teams/{team_id}/signoff-rules",              P.ADMIN),
    ("POST",   "/admin/teams/{team_id}/signoff-rules",              P.ADMIN),
    ("GET",    "/admin/users",                                      P.ADMIN),
    ("POST",   "/admin/users",                                      P.ADMIN),
    ("POST",   "/admin/teams",                                      P.ADMIN),
    ("GET",    "/admin/users/{user_id}",                            P.ADMIN),
    ("POST",   "/admin/users/{user_id}/profile",                    P.ADMIN),
    ("POST",   "/admin/users/{user_id}/teams",                      P.ADMIN),
    ("POST",   "/admin/users/{user_id}/access",                     P.ADMIN),
    ("POST",   "/admin/users/{user_id}/password",                   P.ADMIN),
    ("POST",   "/admin/users/{user_id}/tokens/{token_id}/revoke",   P.ADMIN),
    ("GET",    "/api/v1/products",                                  P.READ),
    ("POST",   "/api/v1/products",                                  P.EDIT),
    ("GET",    "/api/v1/products/{product_id}",                     P.READ),
    ("PATCH",  "/api/v1/products/{product_id}",                     P.EDIT),
    ("DELETE", "/api/v1/products/{product_id}",                     P.EDIT),
    ("GET",    "/api/v1/products/{product_id}/risks",               P.RISK),
    ("GET",    "/api/v1/products/{product_id}/audit",               P.RISK),
    ("GET",    "/api/v1/products/{product_id}/audit.csv",           P.RISK),
    ("GET",    "/api/v1/boards",                                    P.READ),
    ("POST",   "/api/v1/boards",                                    P.EDIT),
    ("GET",    "/api/v1/boards/{board_id}",                         P.READ),
    ("PATCH",  "/api/v1/boards/{board_id}",                         P.EDIT),
    ("DELETE", "/api/v1/boards/{board_id}",                         P.EDIT),
    ("GET",    "/api/v1/boards/{board_id}/sequence",                P.READ),
    ("PUT",    "/api/v1/boards/{board_id}/sequence",                P.EDIT),
    ("GET",    "/api/v1/boards/{board_id}/sequence/revisions",      P.READ),
    ("GET",    "/api/v1/boards/{board_id}/sequence/revisions/{n}",  P.READ),
    ("GET",    "/api/v1/boards/{board_id}/sequence/diff",           P.READ),
    ("POST",   "/api/v1/boards/{board_id}/sequence/approvals",      P.REVIEW),
    ("GET",    "/api/v1/boards/{board_id}/sequence/waivers",        P.READ),
    ("POST",   "/api/v1/boards/{board_id}/sequence/waivers",        WAIVE),
    ("POST",   "/api/v1/boards/{board_id}/sequence/transitions",    P.ADVANCE),
    ("GET",    "/api/v1/parts",                                     P.READ),
    ("POST",   "/api/v1/parts",                                     P.EDIT),
    ("GET",    "/api/v1/parts/{part_id}",                           P.READ),
    ("PUT",    "/api/v1/parts/{part_id}",                           P.EDIT),
    ("GET",    "/api/v1/parts/{part_id}/revisions/{n}",             P.READ),
    ("GET",    "/api/v1/rails",                                     P.READ),
    ("POST",   "/api/v1/rails",                                     P.EDIT),
    ("GET",    "/api/v1/rails/{rail_id}",                           P.READ),
    ("PUT",    "/api/v1/rails/{rail_id}",                           P.EDIT),
    ("DELETE", "/api/v1/rails/{rail_id}",                           P.EDIT),
    ("GET",    "/api/v1/rails/{rail_id}/revisions",                 P.READ),
    ("GET",    "/api/v1/rails/{rail_id}/revisions/{n}",             P.READ),
    ("GET",    "/api/v1/rails/{rail_id}/diff",                      P.READ),
    ("GET",    "/api/v1/rails/{rail_id}/signoff",                   P.READ),
    ("GET",    "/api/v1/rails/{rail_id}/approvals",                 P.READ),
    ("POST",   "/api/v1/rails/{rail_id}/approvals",                 P.REVIEW),
    ("GET",    "/api/v1/rails/{rail_id}/waivers",                   P.READ),
    ("POST",   "/api/v1/rails/{rail_id}/waivers",                   WAIVE),
    ("POST",   "/api/v1/rails/{rail_id}/waivers/{waiver_id}/carry", WAIVE),
    ("POST",   "/api/v1/rails/{rail_id}/retire",                    P.EDIT),
    ("POST",   "/api/v1/rails/{rail_id}/restore",                   P.EDIT),
    ("GET",    "/api/v1/reviews/queue",                             P.REVIEW),
    ("GET",    "/api/v1/reviews/assignments",                       P.READ),
    ("POST",   "/api/v1/reviews/assignments",                       ASSIGN),
    ("DELETE", "/api/v1/reviews/assignments/{assignment_id}",       ASSIGN),
    ("POST",   "/api/v1/rails/{rail_id}/transitions",               P.ADVANCE),
    ("GET",    "/api/v1/rails/{rail_id}/audit",                     P.READ),
    ("POST",   "/api/v1/rails/{rail_id}/analyses",                  P.ANALYZE),
    ("POST",   "/api/v1/boards/{board_id}/analyses",                P.ANALYZE),
    ("GET",    "/api/v1/boards/{board_id}/report.pdf",              P.READ),
    ("GET",    "/api/v1/boards/{board_id}/archived-reports",        P.READ),
    ("GET",    "/api/v1/archived-reports/{archive_id}",             P.READ),
    ("GET",    "/api/v1/archived-reports/{archive_id}/pdf",         P.READ),
    ("GET",    "/api/v1/jobs",                                      P.READ),
    ("GET",    "/api/v1/jobs/{job_id}",                             P.READ),
    ("DELETE", "/api/v1/jobs/{job_id}",                             P.ANALYZE),
    ("POST",   "/api/v1/jobs/{job_id}/retry",                       P.ANALYZE),
    ("GET",    "/api/v1/rails/{rail_id}/results/latest",            P.READ),
    ("GET",    "/api/v1/rails/{rail_id}/revisions/{n}/results",     P.READ),
    ("GET",    "/api/v1/results/{result_id}",                       P.READ),
    ("GET",    "/api/v1/audit",                                     P.ADMIN),
    ("GET",    "/api/v1/me",                                        P.READ),
    ("GET",    "/api/v1/tokens",                                    P.READ),
    ("POST",   "/api/v1/tokens",                                    P.READ),
    ("DELETE", "/api/v1/tokens/{token_id}",                         P.READ),
    ("GET",    "/api/v1/users",                                     P.ADMIN),
    ("POST",   "/api/v1/users",                                     P.ADMIN),
    ("GET",    "/api/v1/users/{user_id}",                           P.ADMIN),
    ("PATCH",  "/api/v1/users/{user_id}",                           P.ADMIN),
    ("GET",    "/api/v1/teams",                                     P.ADMIN),
    ("POST",   "/api/v1/teams",                                     P.ADMIN),
    ("GET",    "/api/v1/teams/{team_id}",                           P.ADMIN),
    ("POST",   "/api/v1/teams/{team_id}/members",                   P.ADMIN),
    ("DELETE", "/api/v1/teams/{team_id}/members/{user_id}",         P.ADMIN),
    ("GET",    "/api/v1/teams/{team_id}/workflow",                  P.READ),
    ("PUT",    "/api/v1/teams/{team_id}/workflow",                  P.ADMIN),
    ("GET",    "/api/v1/teams/{team_id}/signoff-rules",             P.READ),
    ("PUT",    "/api/v1/teams/{team_id}/signoff-rules",             P.ADMIN),
]
EXPECTED = {(method, path): permission for method, path, permission in ROUTES}
ROLES = ["viewer", "designer", "reviewer", "manager", "admin"]
NOBODY = "999999"
STATIC_SAMPLE = {"/static": "/static/railsign.css", "/static/docs": "/static/docs/swagger-ui.css"}


def all_routes(app) -> list[tuple[str, str]]:
    """(method, path) of every route the app serves, from its own route table (HEAD is GET's twin)."""
    iterate = getattr(fastapi.routing, "iter_route_contexts", None)
    routes = list(iterate(app.routes)) if iterate else list(app.routes)
    out = []
    for route in routes:
        if isinstance(getattr(route, "original_route", route), Mount) or isinstance(route, Mount):
            out.append(("GET", route.path))
            continue
        for method in sorted(route.methods or ()):
            if method != "HEAD":
                out.append((method, route.path_format))
    return out


def _url(path: str) -> str:
    if path in STATIC_SAMPLE:
        return STATIC_SAMPLE[path]
    out = path
    while "{" in out:
        start = out.index("{")
        out = out[:start] + NOBODY + out[out.index("}", start) + 1:]
    return out


def _asks_for_login(response) -> bool:
    if response.status_code in (302, 303, 307) and response.headers.get("location", "").startswith("/login?next="):
        return True
    if response.status_code == 401 and response.headers.get("content-type", "").startswith("application/json"):
        return response.json()["error"]["code"] == "not_logged_in"
    return False


def test_every_route_has_an_expectation(app):
    served = all_routes(app)
    missing = [r for r in served if r not in EXPECTED]
    assert missing == [], f"routes without a line in ROUTES of {__name__}: {missing}"
    gone = [r for r in EXPECTED if r not in served]
    assert gone == [], f"lines in ROUTES for routes the app no longer serves: {gone}"
    assert len(served) == len(set(served)), "a method and path is served twice"


def test_every_route_refuses_or_allows_each_role_as_designed(client, people):
    problems = []
    for method, path in all_routes(client.app):
        need = EXPECTED.get((method, path))
        if need is None:
            continue  # reported by test_every_route_has_an_expectation
        url = _url(path)
        anonymous = client.request(method, url, follow_redirects=False)
        if need == PUBLIC:
            if _asks_for_login(anonymous) or anonymous.status_code == 403:
                problems.append(f"{method} {path}: no login -> {anonymous.status_code}, expected no refusal")
        elif path.startswith("/api/"):
            if anonymous.status_code != 401 or anonymous.json()["error"]["code"] != "not_logged_in":
                problems.append(f"{method} {path}: no login -> {anonymous.status_code}, expected 401")
        elif not _asks_for_login(anonymous):
            problems.append(f"{method} {path}: no login -> {anonymous.status_code}, expected a redirect to /login")
        for role in ROLES:
            r = client.request(method, url, headers=people.headers(role), follow_redirects=False)
            allowed = need == PUBLIC or need in ROLE_PERMISSIONS[role] or role in LET_THROUGH.get(need, ())
            if allowed and (r.status_code in (401, 403) and not (need == PUBLIC and r.status_code == 401)
                            or _asks_for_login(r)):
                problems.append(f"{method} {path}: {role} -> {r.status_code}, expected to be let through")
            if not allowed and r.status_code != 403:
                problems.append(f"{method} {path}: {role} -> {r.status_code}, expected 403")
    assert problems == []


@pytest.mark.parametrize("role", ROLES)
def test_the_declared_permissions_match_the_roles(role):
    """The table above reads permissions from ROLE_PERMISSIONS; pin what each role may do."""
    expected = {
        "viewer": {P.READ},
        "designer": {P.READ, P.EDIT, P.ANALYZE, P.ADVANCE},
        "reviewer": {P.READ, P.ANALYZE, P.REVIEW, P.ADVANCE},
        "manager": {P.READ, P.RISK, P.ADVANCE},
        "admin": {P.READ, P.EDIT, P.ANALYZE, P.RISK, P.ADMIN, P.ADVANCE},
    }
    assert set(ROLE_PERMISSIONS[role]) == expected[role]

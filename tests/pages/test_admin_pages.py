"""The admin pages (team workflows, users, teams) and the account page's password, through HTTP as a
browser sends them, on SQLite and PostgreSQL: every way through, and the refusals."""

from __future__ import annotations

import copy
import re
from html.parser import HTMLParser

from sqlalchemy import func, select

from server.credentials import verify_password
from server.models import AuditEntry, Team, User
from server.services import teams as team_service
from server.services import users as user_service
from server.services.access import PERMISSION_WORDS, Actor, Permission, ROLE_PERMISSIONS, refusal, role_abilities
from server.services.errors import Forbidden, Invalid
from server.workflow import DEFAULT_WORKFLOW
from tests.pages.helpers import log_in as cookie_for
from tests.pages.test_page_accessibility import problems_of
from tests.signoff_support import csrf_from, log_in

PASSWORD = "ferrite-bead-2201"


class _Form(HTMLParser):
    """The fields a browser sends for one form of a page: text, hidden, number and password inputs, ticked
    checkboxes and radios, the chosen option of each select."""

    def __init__(self, form_id: str) -> None:
        super().__init__()
        self.form_id, self.inside, self.fields = form_id, False, []
        self._select: str | None = None
        self._options: list[tuple[str, bool]] = []

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "form":
            self.inside = a.get("id") == self.form_id
        if not self.inside:
            return
        if tag == "input" and a.get("name"):
            if a.get("type") in ("checkbox", "radio") and "checked" not in a:
                return
            self.fields.append((a["name"], a.get("value", "on" if a.get("type") in ("checkbox", "radio") else "")))
        elif tag == "select":
            self._select, self._options = a.get("name"), []
        elif tag == "option" and self._select:
            self._options.append((a.get("value", ""), "selected" in a))

    def handle_endtag(self, tag):
        if tag == "form":
            self.inside = False
        if tag == "select" and self._select:
            chosen = [v for v, selected in self._options if selected] or [self._options[0][0]]
            self.fields.append((self._select, chosen[0]))
            self._select = None


def form_fields(html: str, form_id: str) -> list[tuple[str, str]]:
    parser = _Form(form_id)
    parser.feed(html)
    assert parser.fields, f"no form {form_id} on the page"
    return parser.fields


def as_data(pairs: list[tuple[str, str]]) -> dict[str, list[str]]:
    out: dict[str, list[str]] = {}
    for key, value in pairs:
        out.setdefault(key, []).append(value)
    return out


def changed(pairs, **values) -> list[tuple[str, str]]:
    """The form's fields with some replaced (a name given None is dropped: an unticked box)."""
    keys = {k.replace("__", "-") for k in values}
    new = {k.replace("__", "-"): v for k, v in values.items()}
    out = [(k, v) for k, v in pairs if k not in keys]
    return out + [(k, v) for k, v in new.items() if v is not None]


def _audit(session_factory, **where) -> list[AuditEntry]:
    with session_factory() as session:
        stmt = select(AuditEntry).order_by(AuditEntry.id)
        for key, value in where.items():
            stmt = stmt.where(getattr(AuditEntry, key) == value)
        return list(session.scalars(stmt))


def _password_user(session_factory, name="pat", role="designer", team="alpha") -> int:
    with session_factory() as session:
        return user_service.create_user(session=session, actor=Actor.system("test-setup"), username=name, role=role,
                                        password=PASSWORD, teams=[team]).id


# --- the workflow editor --------------------------------------------------------------------------


def test_the_editor_picks_states_from_lists_and_shows_the_diagram(client, app, people):
    cookie_for(client, app, people.ids["admin"])
    team = people.team_ids["alpha"]
    page = client.get(f"/admin/teams/{team}/workflow")
    assert page.status_code == 200 and problems_of(page.text) == []
    html = page.text
    for row in range(8):        # six transitions and two empty rows: both ends are lists of the states
        for end in ("from", "to"):
            select_html = re.search(rf'<select id="tr-{row}-{end}" name="tr-{row}-{end}".*?</select>', html, re.S)
            assert select_html, (row, end)
            options = re.findall(r'<option value="(\d*)"[^>]*>([^<]*)</option>', select_html.group(0))
            assert [label for _, label in options][:5] == ["choose a state", "in design", "awaiting review",
                                                           "margins accepted", "frozen for build"]
    assert not re.search(r'name="tr-\d+-(from|to)" type="text"', html) and "<datalist" not in html
    roles = re.search(r'<fieldset class="roles" id="tr-2-roles">.*?</fieldset>', html, re.S).group(0)
    labelled = r'<label class="check"><input type="checkbox" name="tr-2-roles" value="(\w+)"[^>]*> (\w+)</label>'
    assert re.findall(labelled, roles) == [(r, r) for r in ("designer", "reviewer", "manager", "admin")]
    assert html.count('<g class="state') == 4 and html.count('<g class="transition') == 6
    assert "<legend>Transition 4</legend>" in html and "<legend>Transition 7 (new)</legend>" in html


def test_the_form_sent_unchanged_saves_the_same_workflow_and_a_change_is_saved(client, app, people):
    cookie_for(client, app, people.ids["admin"])
    team = people.team_ids["alpha"]
    sent = form_fields(client.get(f"/admin/teams/{team}/workflow").text, "workflow-form")
    saved = client.post(f"/admin/teams/{team}/workflow", data=as_data(sent))
    assert saved.status_code == 200 and "Saved as version 2" in saved.text
    stored = client.get(f"/api/v1/teams/{team}/workflow", headers=people.headers("admin")).json()
    assert stored["definition"] == DEFAULT_WORKFLOW and stored["updated_by"] == "admin"
    # a state renamed is renamed in every transition that picks it; a demand changed
    sent = form_fields(saved.text, "workflow-form")
    again = client.post(f"/admin/teams/{team}/workflow",
                        data=as_data(changed(sent, state__1__name="in review", tr__2__approvals="2")))
    assert again.status_code == 200 and "Saved as version 3" in again.text
    definition = client.get(f"/api/v1/teams/{team}/workflow", headers=people.headers("admin")).json()["definition"]
    expected = copy.deepcopy(DEFAULT_WORKFLOW)
    expected["states"][1]["name"] = "in review"
    for t in expected["transitions"]:
        t["from"], t["to"] = ("in review" if t["from"] == "awaiting review" else t["from"],
                              "in review" if t["to"] == "awaiting review" else t["to"])
    expected["transitions"][2]["demands"]["approvals"] = 2
    assert definition == expected
    assert [e.action for e in _audit(app.state.sessionmaker, object_type="workflow")][-2:] == ["update", "update"]


def test_a_new_state_and_its_transitions_are_added_in_one_save_and_a_removal_takes_them_out(client, app, people):
    cookie_for(client, app, people.ids["admin"])
    team = people.team_ids["alpha"]
    sent = form_fields(client.get(f"/admin/teams/{team}/workflow").text, "workflow-form")
    added = changed(sent, state__4__name="parked", state__4__description="waiting for a part",
                    tr__6__name="park", tr__6__from="0", tr__6__to="4", tr__6__roles="designer",
                    tr__7__name="resume", tr__7__from="4", tr__7__to="0")
    added.append(("tr-7-roles", "designer"))
    r = client.post(f"/admin/teams/{team}/workflow", data=as_data(added))
    assert r.status_code == 200, r.text
    definition = client.get(f"/api/v1/teams/{team}/workflow", headers=people.headers("admin")).json()["definition"]
    assert definition["states"][4] == {"name": "parked", "initial": False, "signed_off": False, "archives": False,
                                       "description": "waiting for a part"}
    assert [s["archives"] for s in definition["states"][:4]] == [False, False, False, True]   # the editor kept it
    assert [(t["name"], t["from"], t["to"], t["roles"]) for t in definition["transitions"][6:]] == [
        ("park", "in design", "parked", ["designer"]), ("resume", "parked", "in design", ["designer"])]
    assert '<g class="state" data-state="parked">' in r.text           # the diagram shows what was saved
    # removing the state alone: the transitions that pick it are refused beside their rows
    sent = form_fields(r.text, "workflow-form")
    refused = client.post(f"/admin/teams/{team}/workflow", data=as_data(changed(sent, state__4__remove="on")))
    assert refused.status_code == 422
    for row in (6, 7):
        card = re.search(rf'<fieldset class="transition-card has-problem" id="transition-{row}">.*?</fieldset>',
                         refused.text, re.S)
        assert card and "is not a state of this workflow" in card.group(0)
        assert f"Transition {row + 1}, " in card.group(0)
    sent = form_fields(refused.text, "workflow-form")
    gone = client.post(f"/admin/teams/{team}/workflow",
                       data=as_data(changed(sent, tr__6__remove="on", tr__7__remove="on")))
    assert gone.status_code == 200 and "Saved as version 3" in gone.text
    definition = client.get(f"/api/v1/teams/{team}/workflow", headers=people.headers("admin")).json()["definition"]
    assert definition == DEFAULT_WORKFLOW


def test_a_refused_workflow_shows_each_problem_beside_its_transition_in_the_forms_numbering(client, app, people):
    cookie_for(client, app, people.ids["admin"])
    team = people.team_ids["alpha"]
    sent = form_fields(client.get(f"/admin/teams/{team}/workflow").text, "workflow-form")
    # transition 2 removed above the one in error, so the definition's transitions[2] is the form's transition 4
    bad = changed(sent, tr__1__remove="on", tr__3__to="", tr__2__approvals="0")
    r = client.post(f"/admin/teams/{team}/workflow", data=as_data(bad))
    assert r.status_code == 422 and problems_of(r.text) == []
    html = r.text
    assert "transitions[" not in html and "definition." not in html and "states[" not in html
    card4 = re.search(r'<fieldset class="transition-card has-problem" id="transition-3">.*?</fieldset>', html, re.S)
    assert card4 and "Transition 4, to state: choose a state" in card4.group(0)
    assert re.search(r'<select id="tr-3-to" name="tr-3-to" class="state-pick" aria-invalid="true" '
                     r'aria-describedby="transition-3-error">', html)
    card3 = re.search(r'<fieldset class="transition-card has-problem" id="transition-2">.*?</fieldset>', html, re.S)
    assert card3 and "Transition 3, approvals needed: &#39;accept margins&#39; enters the signed-off state" in \
        card3.group(0)
    summary = re.search(r'<div class="error-summary".*?</div>', html, re.S).group(0)
    assert '<a href="#tr-2-approvals">Transition 3, approvals needed</a>' in summary
    assert '<a href="#tr-3-to">Transition 4, to state</a>: choose a state' in summary
    # what was typed stays, the removed row with it, so the numbering is the one the person sees
    kept = dict(form_fields(html, "workflow-form"))
    assert kept["tr-1-remove"] == "on" and kept["tr-3-to"] == "" and kept["tr-2-approvals"] == "0"
    assert client.get(f"/api/v1/teams/{team}/workflow", headers=people.headers("admin")).json()["version"] == 1


def test_an_unreachable_state_is_named_beside_its_row(client, app, people):
    cookie_for(client, app, people.ids["admin"])
    team = people.team_ids["alpha"]
    sent = form_fields(client.get(f"/admin/teams/{team}/workflow").text, "workflow-form")
    r = client.post(f"/admin/teams/{team}/workflow", data=as_data(changed(sent, state__5__name="parked")))
    assert r.status_code == 422
    row = re.search(r'<ul class="row-problems" id="state-5-error">.*?</ul>', r.text, re.S).group(0)
    assert "State 6: &#39;parked&#39; cannot be reached from the initial state &#39;in design&#39;" in row
    assert 'value="parked"' in r.text


def test_a_workflow_saved_meanwhile_is_not_overwritten_unseen(client, app, people):
    cookie_for(client, app, people.ids["admin"])
    team = people.team_ids["alpha"]
    opened = form_fields(client.get(f"/admin/teams/{team}/workflow").text, "workflow-form")
    assert dict(opened)["version"] == "1"
    other = copy.deepcopy(DEFAULT_WORKFLOW)
    other["name"] = "changed by another admin"
    assert client.put(f"/api/v1/teams/{team}/workflow", json={"definition": other},
                      headers=people.headers("admin")).status_code == 200
    mine = changed(opened, tr__2__approvals="3")
    r = client.post(f"/admin/teams/{team}/workflow", data=as_data(mine))
    assert r.status_code == 409
    assert "saved version 2 of the workflow of alpha after version 1 was opened" in r.text
    kept = dict(form_fields(r.text, "workflow-form"))
    assert kept["tr-2-approvals"] == "3" and kept["version"] == "2" and kept["name"] == "margin review"
    stored = client.get(f"/api/v1/teams/{team}/workflow", headers=people.headers("admin")).json()
    assert stored["version"] == 2 and stored["definition"]["name"] == "changed by another admin"
    again = client.post(f"/admin/teams/{team}/workflow", data=as_data(list(kept.items())))
    assert again.status_code == 200 and "Saved as version 3" in again.text


def test_only_admins_open_or_save_workflows(client, app, people):
    team = people.team_ids["alpha"]
    csrf = cookie_for(client, app, people.ids["manager"])
    assert client.get(f"/admin/teams/{team}/workflow").status_code == 403
    assert client.get("/admin/workflows").status_code == 403
    refused = client.post(f"/admin/teams/{team}/workflow", data={"csrf_token": csrf, "name": "x"})
    assert refused.status_code == 403 and "may not manage users, teams and workflows" in refused.text
    cookie_for(client, app, people.ids["admin"])
    listing = client.get("/admin/workflows")
    assert listing.status_code == 200 and f'href="/admin/teams/{team}/workflow"' in listing.text
    assert client.get(f"/api/v1/teams/{team}/workflow", headers=people.headers("admin")).json()["version"] == 1


# --- users and teams ------------------------------------------------------------------------------


def test_an_admin_adds_a_user_with_teams_and_a_first_password_who_then_logs_in(client, app, people):
    csrf = cookie_for(client, app, people.ids["admin"])
    page = client.get("/admin/users")
    assert page.status_code == 200 and problems_of(page.text) == []
    assert "approve revisions and waive checks" in page.text                   # the roles in words
    beta = people.team_ids["beta"]
    r = client.post("/admin/users", data={"csrf_token": csrf, "username": "quinn", "display_name": "Quinn Ode",
                                          "role": "reviewer", "teams": [str(beta)], "password": PASSWORD,
                                          "password_repeat": PASSWORD}, follow_redirects=False)
    assert r.status_code == 303 and re.fullmatch(r"/admin/users/\d+\?done=created", r.headers["location"])
    shown = client.get(r.headers["location"])
    assert shown.status_code == 200 and "The user was added." in shown.text and problems_of(shown.text) == []
    with app.state.sessionmaker() as session:
        quinn = session.scalar(select(User).where(User.username == "quinn"))
        assert (quinn.role, quinn.display_name, sorted(t.name for t in quinn.teams)) == ("reviewer", "Quinn Ode",
                                                                                         ["beta"])
        assert verify_password(quinn.password_hash, PASSWORD)
    trail = [(e.action, e.object_type, e.user_name) for e in _audit(app.state.sessionmaker)][-2:]
    assert trail == [("create", "user", "admin"), ("add_member", "team", "admin")]
    other = client.__class__(client.app)
    assert log_in(other, "quinn", PASSWORD).status_code == 303


def test_a_new_user_is_refused_beside_the_field_and_nothing_is_added(client, app, people):
    csrf = cookie_for(client, app, people.ids["admin"])

    def count() -> int:
        with app.state.sessionmaker() as session:
            return session.scalar(select(func.count()).select_from(User))

    before = count()
    form = {"csrf_token": csrf, "username": "has space", "role": "designer", "password": "short",
            "password_repeat": "shorter"}
    r = client.post("/admin/users", data=form)
    assert r.status_code == 422 and problems_of(r.text) == []
    assert re.search(r'id="new-username-error">is required: letters, digits', r.text)
    assert 'id="new-password-error">needs at least 8 characters' in r.text
    assert 'id="new-password-repeat-error">differs from the password' in r.text
    assert 'value="has space"' in r.text                                        # what was typed stays
    taken = client.post("/admin/users", data={**form, "username": "designer", "password": PASSWORD,
                                              "password_repeat": PASSWORD})
    assert taken.status_code == 409 and "a user named &#39;designer&#39; exists already" in taken.text
    no_role = client.post("/admin/users", data={"csrf_token": csrf, "username": "rho", "role": "boss"})
    assert no_role.status_code == 422 and 'id="new-role-error">choose one of the roles' in no_role.text
    assert count() == before


def test_an_admin_sets_name_role_and_teams_through_the_services_that_own_them(client, app, people):
    csrf = cookie_for(client, app, people.ids["admin"])
    viewer = people.ids["viewer"]
    r = client.post(f"/admin/users/{viewer}/profile", data={"csrf_token": csrf, "display_name": "Vera Viewer",
                                                             "role": "reviewer"}, follow_redirects=False)
    assert r.status_code == 303 and r.headers["location"] == f"/admin/users/{viewer}?done=profile"
    page = client.get(r.headers["location"])
    assert "Name and role saved." in page.text and "approve revisions and waive checks" in page.text
    update = _audit(app.state.sessionmaker, object_type="user", action="update")[-1]
    assert (update.before["role"], update.after["role"], update.after["display_name"]) == \
        ("viewer", "reviewer", "Vera Viewer")
    beta = people.team_ids["beta"]
    r = client.post(f"/admin/users/{viewer}/teams", data={"csrf_token": csrf, "teams": [str(beta)]},
                    follow_redirects=False)
    assert r.status_code == 303
    assert client.get("/api/v1/me", headers=people.headers("viewer")).json()["teams"] == [{"id": beta, "name": "beta"}]
    moves = [(e.action, e.object_repr) for e in _audit(app.state.sessionmaker, object_type="team")][-2:]
    assert moves == [("remove_member", "alpha"), ("add_member", "beta")]
    unknown = client.post(f"/admin/users/{viewer}/teams", data={"csrf_token": csrf, "teams": ["999999"]})
    assert unknown.status_code == 422 and "names no team" in unknown.text
    assert client.get("/api/v1/me", headers=people.headers("viewer")).json()["teams"] == [{"id": beta, "name": "beta"}]
    # an admin keeps their own role
    own = client.post(f"/admin/users/{people.ids['admin']}/profile",
                      data={"csrf_token": csrf, "display_name": "admin", "role": "viewer"})
    assert own.status_code == 409 and "you cannot change your own role" in own.text
    assert client.get("/api/v1/me", headers=people.headers("admin")).json()["role"] == "admin"
    missing = client.post("/admin/users/999999/profile", data={"csrf_token": csrf, "role": "viewer"})
    assert missing.status_code == 404


def test_a_disabled_user_cannot_log_in_and_their_sessions_and_tokens_stop(client, app, people):
    pat = _password_user(app.state.sessionmaker)
    with app.state.sessionmaker() as session:
        _, token = user_service.create_token(session=session, actor=Actor.system("test-setup"), username="pat",
                                             name="script")
    theirs = client.__class__(client.app)
    assert log_in(theirs, "pat", PASSWORD).status_code == 303
    assert theirs.get("/account").status_code == 200
    csrf = cookie_for(client, app, people.ids["admin"])
    r = client.post(f"/admin/users/{pat}/access", data={"csrf_token": csrf, "action": "disable"},
                    follow_redirects=False)
    assert r.status_code == 303 and r.headers["location"] == f"/admin/users/{pat}?done=disabled"
    page = client.get(r.headers["location"])
    assert "they can no longer log in" in page.text and 'id="enable-user"' in page.text
    assert theirs.get("/account", follow_redirects=False).headers["location"].startswith("/login")
    assert client.get("/api/v1/me", headers={"Authorization": f"Bearer {token}"}).status_code == 401
    refused = log_in(client.__class__(client.app), "pat", PASSWORD)
    assert refused.status_code == 401 and "not right" in refused.text
    assert _audit(app.state.sessionmaker, action="login_failed")[-1].after["reason"] == "account disabled"
    # enabled again: the password and the token work again
    assert client.post(f"/admin/users/{pat}/access", data={"csrf_token": csrf, "action": "enable"},
                       follow_redirects=False).status_code == 303
    assert log_in(client.__class__(client.app), "pat", PASSWORD).status_code == 303
    assert client.get("/api/v1/me", headers={"Authorization": f"Bearer {token}"}).status_code == 200
    # nobody disables themself; an action that is neither is refused
    own = client.get(f"/admin/users/{people.ids['admin']}")
    assert 'id="disable-user"' not in own.text and "You cannot disable your own account." in own.text
    assert client.post(f"/admin/users/{people.ids['admin']}/access",
                       data={"csrf_token": csrf, "action": "disable"}).status_code == 409
    assert client.post(f"/admin/users/{pat}/access", data={"csrf_token": csrf, "action": "delete"}).status_code == 422


def test_an_admin_sets_a_password_and_the_old_sessions_end(client, app, people):
    pat = _password_user(app.state.sessionmaker)
    theirs = client.__class__(client.app)
    assert log_in(theirs, "pat", PASSWORD).status_code == 303
    csrf = cookie_for(client, app, people.ids["admin"])
    short = client.post(f"/admin/users/{pat}/password", data={"csrf_token": csrf, "password": "short",
                                                               "password_repeat": "short"})
    assert short.status_code == 422 and 'id="set-password-error">needs at least 8 characters' in short.text
    r = client.post(f"/admin/users/{pat}/password", data={"csrf_token": csrf, "password": "new-" + PASSWORD,
                                                           "password_repeat": "new-" + PASSWORD},
                    follow_redirects=False)
    assert r.status_code == 303 and "Every session of the old password has ended." in client.get(
        r.headers["location"]).text
    assert theirs.get("/account", follow_redirects=False).status_code == 303
    assert log_in(client.__class__(client.app), "pat", "new-" + PASSWORD).status_code == 303
    entry = _audit(app.state.sessionmaker, action="update", object_type="user")[-1]
    assert entry.after["password"] == "changed" and PASSWORD not in str(entry.after)


def test_an_admin_revokes_a_users_api_token_from_their_page(client, app, people):
    csrf = cookie_for(client, app, people.ids["admin"])
    designer = people.ids["designer"]
    page = client.get(f"/admin/users/{designer}")
    token_id = int(re.search(rf'action="/admin/users/{designer}/tokens/(\d+)/revoke"', page.text).group(1))
    wrong_owner = client.post(f"/admin/users/{people.ids['viewer']}/tokens/{token_id}/revoke",
                              data={"csrf_token": csrf})
    assert wrong_owner.status_code == 404
    assert client.get("/api/v1/me", headers=people.headers("designer")).status_code == 200
    r = client.post(f"/admin/users/{designer}/tokens/{token_id}/revoke", data={"csrf_token": csrf},
                    follow_redirects=False)
    assert r.status_code == 303
    assert "The token was revoked" in client.get(r.headers["location"]).text
    assert client.get("/api/v1/me", headers=people.headers("designer")).status_code == 401
    assert _audit(app.state.sessionmaker, action="revoke")[-1].object_repr == "designer/tests"


def test_an_admin_adds_a_team_which_gets_the_default_workflow(client, app, people):
    csrf = cookie_for(client, app, people.ids["admin"])
    r = client.post("/admin/teams", data={"csrf_token": csrf, "name": "  gamma   rays "}, follow_redirects=False)
    assert r.status_code == 303 and "The team was added" in client.get(r.headers["location"]).text
    with app.state.sessionmaker() as session:
        team_id = session.scalar(select(Team.id).where(Team.name == "gamma rays"))
    assert client.get(f"/api/v1/teams/{team_id}/workflow", headers=people.headers("admin")).json()["definition"] \
        == DEFAULT_WORKFLOW
    twice = client.post("/admin/teams", data={"csrf_token": csrf, "name": "gamma rays"})
    assert twice.status_code == 409 and "exists already" in twice.text and problems_of(twice.text) == []
    empty = client.post("/admin/teams", data={"csrf_token": csrf, "name": " "})
    assert empty.status_code == 422 and 'id="team-name-error">is required' in empty.text


def test_the_users_pages_are_for_admins_only(client, app, people):
    csrf = cookie_for(client, app, people.ids["designer"])
    for url in ("/admin/users", f"/admin/users/{people.ids['viewer']}"):
        r = client.get(url)
        assert r.status_code == 403 and "your role (designer) may not manage users, teams and workflows" in r.text
    posts = [("/admin/users", {"username": "mallory", "role": "admin"}), ("/admin/teams", {"name": "mallory"}),
             (f"/admin/users/{people.ids['designer']}/profile", {"role": "admin"}),
             (f"/admin/users/{people.ids['viewer']}/access", {"action": "disable"})]
    for url, data in posts:
        assert client.post(url, data={"csrf_token": csrf, **data}).status_code == 403
    assert client.get("/api/v1/me", headers=people.headers("designer")).json()["role"] == "designer"
    with app.state.sessionmaker() as session:
        assert session.scalar(select(User).where(User.username == "mallory")) is None
    home = client.get("/")
    assert 'href="/admin/users"' not in home.text
    cookie_for(client, app, people.ids["admin"])
    assert 'href="/admin/users"' in client.get("/").text


def test_memberships_are_set_in_one_step_by_admins_only(session_factory, people):
    with session_factory() as session:
        admin = Actor.for_user(user_service.get_user_by_name(session=session, username="admin"))
        designer = Actor.for_user(user_service.get_user_by_name(session=session, username="designer"))
        try:
            team_service.set_memberships(session=session, actor=designer, user_id=people.ids["viewer"], team_ids=[])
        except Forbidden:
            pass
        else:
            raise AssertionError("a designer set memberships")
        both = [people.team_ids["alpha"], people.team_ids["beta"]]
        user = team_service.set_memberships(session=session, actor=admin, user_id=people.ids["viewer"], team_ids=both)
        assert sorted(t.name for t in user.teams) == ["alpha", "beta"]
        recorded = session.scalar(select(func.count()).select_from(AuditEntry))
        team_service.set_memberships(session=session, actor=admin, user_id=people.ids["viewer"], team_ids=both)
        assert session.scalar(select(func.count()).select_from(AuditEntry)) == recorded   # nothing changed
        user = team_service.set_memberships(session=session, actor=admin, user_id=people.ids["viewer"], team_ids=[])
        assert user.teams == []


# --- your own password ----------------------------------------------------------------------------


def test_you_change_your_own_password_and_this_session_goes_on(client, app, people):
    _password_user(app.state.sessionmaker)
    assert log_in(client, "pat", PASSWORD).status_code == 303
    elsewhere = client.__class__(client.app)
    assert log_in(elsewhere, "pat", PASSWORD).status_code == 303
    page = client.get("/account")
    assert problems_of(page.text) == [] and 'id="current-password"' in page.text
    r = client.post("/account/password", data={"csrf_token": csrf_from(page.text), "current_password": PASSWORD,
                                                "new_password": "new-" + PASSWORD,
                                                "new_password_repeat": "new-" + PASSWORD}, follow_redirects=False)
    assert r.status_code == 303 and r.headers["location"] == "/account?done=password"
    assert "railsign_session=" in r.headers["set-cookie"] and "HttpOnly" in r.headers["set-cookie"]
    after = client.get(r.headers["location"], follow_redirects=False)        # still logged in here, the cookie renewed
    assert after.status_code == 200 and "Your password was changed" in after.text
    assert csrf_from(after.text) != csrf_from(page.text)
    assert elsewhere.get("/account", follow_redirects=False).status_code == 303   # the other one has ended
    assert log_in(client.__class__(client.app), "pat", PASSWORD).status_code == 401
    assert log_in(client.__class__(client.app), "pat", "new-" + PASSWORD).status_code == 303
    entry = _audit(app.state.sessionmaker, action="update", object_type="user")[-1]
    assert entry.user_name == "pat" and entry.after["password"] == "changed" and PASSWORD not in str(entry.after)


def test_your_password_is_not_changed_without_the_current_one_or_with_a_bad_new_one(client, app, people):
    pat = _password_user(app.state.sessionmaker)
    assert log_in(client, "pat", PASSWORD).status_code == 303
    csrf = csrf_from(client.get("/account").text)
    cases = [({"current_password": "not-it-at-all", "new_password": "a-new-one-123", "new_password_repeat":
               "a-new-one-123"}, 'id="current-password-error">is not your current password'),
             ({"current_password": PASSWORD, "new_password": "a-new-one-123", "new_password_repeat": "a-new-one-124"},
              'id="new-password-repeat-error">differs from the new password'),
             ({"current_password": PASSWORD, "new_password": "short", "new_password_repeat": "short"},
              'id="new-password-error">needs at least 8 characters'),
             ({"current_password": PASSWORD, "new_password": PASSWORD, "new_password_repeat": PASSWORD},
              'id="new-password-error">must differ from the current password')]
    for data, expected in cases:
        r = client.post("/account/password", data={"csrf_token": csrf, **data})
        assert r.status_code == 422 and expected in r.text, expected
        assert 'aria-invalid="true"' in r.text and problems_of(r.text) == []
    assert client.post("/account/password", data={"current_password": PASSWORD, "new_password": "x" * 9,
                                                  "new_password_repeat": "x" * 9}).status_code == 403   # no CSRF
    with app.state.sessionmaker() as session:
        assert verify_password(session.get(User, pat).password_hash, PASSWORD)
    refused = _audit(app.state.sessionmaker, action="password_change_refused")
    assert len(refused) == 1 and refused[0].user_name == "pat"
    assert client.get("/account").status_code == 200                          # still logged in


def test_an_account_without_a_password_is_told_so(client, app, people):
    csrf = cookie_for(client, app, people.ids["reviewer"])                     # a token-only account
    page = client.get("/account")
    assert 'id="current-password"' not in page.text and "Your account has no password" in page.text
    r = client.post("/account/password", data={"csrf_token": csrf, "current_password": "", "new_password": "x" * 9,
                                                "new_password_repeat": "x" * 9})
    assert r.status_code == 422 and "Your account has no password" in r.text
    with app.state.sessionmaker() as session:
        try:
            user_service.change_own_password(session=session, actor=Actor.system(), current_password="",
                                             new_password="x" * 9)
        except Forbidden:
            pass
        else:
            raise AssertionError("the system actor changed a password")
        reviewer = Actor.for_user(session.get(User, people.ids["reviewer"]))
        try:
            user_service.change_own_password(session=session, actor=reviewer, current_password="",
                                             new_password="x" * 9)
        except Invalid as exc:
            assert exc.details == [{"field": "current_password", "message": "your account has no password yet"}]


# --- permissions in words -------------------------------------------------------------------------


def test_every_permission_has_words_and_pages_show_the_words_not_the_names(client, app, people):
    names = {v for k, v in vars(Permission).items() if not k.startswith("_")}
    assert set(PERMISSION_WORDS) == names and all(" " in words for words in PERMISSION_WORDS.values())
    assert all(set(p) <= names for p in ROLE_PERMISSIONS.values())
    cookie_for(client, app, people.ids["reviewer"])
    page = client.get("/account")
    listed = re.search(r'<ul class="abilities" id="abilities">(.*?)</ul>', page.text, re.S).group(1)
    assert re.findall(r"<li>(.*?)</li>", listed) == [w.replace("'", "&#39;") for w in role_abilities("reviewer")]
    assert "approve revisions and waive checks" in listed and "review, " not in page.text
    forbidden = client.get("/api/v1/users", headers=people.headers("reviewer"))
    assert forbidden.status_code == 403
    assert forbidden.json()["error"]["message"] == "your role (reviewer) may not manage users, teams and workflows"
    assert refusal("viewer", Permission.EDIT) == "your role (viewer) may not create and change products, boards, " \
                                                 "rails and parts"

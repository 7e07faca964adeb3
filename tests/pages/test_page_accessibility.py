"""Every page, taken from the app's route table: labelled inputs, headings in order, verdicts in words,
controls that work from the keyboard. A new page route is covered without touching this test;
a route with a new path parameter fails until the parameter gets a value here."""

from __future__ import annotations

import re
from collections import Counter

import pytest
from fastapi.routing import APIRoute

from server.pages.display import VERDICT_STYLES
from server.pages.forms import form_from_document
from server.services.rails import normalize_document
from tests.factories import rail_doc
from tests.pages.helpers import Page, log_in, seed_board

VERDICT_WORDS = {s.word for s in VERDICT_STYLES.values()} | {"within budget", "over budget", "signed off", "not signed off"}
NOT_PAGES = ("/api/", "/static/", "/healthz", "/docs", "/redoc", "/openapi")


def _walk(routes, prefix: str = ""):
    """Every route with its full path, through included routers (kept as includes by FastAPI)."""
    for route in routes:
        inner = getattr(route, "original_router", None)
        if inner is not None:
            yield from _walk(inner.routes, prefix + route.include_context.prefix)
        elif isinstance(route, APIRoute):
            yield prefix + route.path, route


def page_routes(app) -> list[str]:
    """Paths of every GET route that answers with a page (downloads, ``*.csv`` and ``*.pdf``, and the
    event streams a page follows, ``*/events``, are not pages)."""
    return sorted({path for path, route in _walk(app.routes)
                   if "GET" in route.methods and not path.startswith(NOT_PAGES)
                   and not path.endswith((".csv", ".pdf", "/events"))})


def fill(path: str, values: dict[str, int]) -> str:
    def sub(m: re.Match) -> str:
        name = m.group(1).split(":")[0]
        assert name in values, f"page route {path} has a path parameter '{name}': give it a value in this test"
        return str(values[name])
    return re.sub(r"\{([^}]+)\}", sub, path)


def problems_of(html: str) -> list[str]:
    page = Page(html)
    found = []
    for c in page.controls:
        a = c["attrs"]
        if not (c["wrapped"] or a.get("aria-label") or a.get("aria-labelledby") or a.get("id") in page.label_for):
            found.append(f"{c['tag']} name={a.get('name')!r} has no label")
    levels = [level for level, _ in page.headings]
    if not levels or levels[0] != 1:
        found.append(f"the first heading is not an h1: {page.headings[:2]}")
    if levels.count(1) != 1:
        found.append(f"{levels.count(1)} h1 headings")
    for (a, ta), (b, tb) in zip(page.headings, page.headings[1:]):
        if b > a + 1:
            found.append(f"heading level skipped: h{a} '{ta}' then h{b} '{tb}'")
    for text in page.verdicts:
        if text not in VERDICT_WORDS:
            found.append(f"a verdict without its word: {text!r}")
    for tag, attrs in page.clickables:
        found.append(f"a click-only handler on <{tag}>")
    for b in page.buttons:
        if not (b["text"] or b["attrs"].get("aria-label")):
            found.append(f"a button without text: {b['attrs']}")
    for tag_attrs in re.findall(r"tabindex=\"([1-9]\d*)\"", html):
        found.append(f"a positive tabindex {tag_attrs} breaks the keyboard order")
    dupes = [i for i, n in Counter(page.ids).items() if n > 1]
    if dupes:
        found.append(f"ids used twice: {dupes}")
    sortable = re.search(r'<table[^>]*class="sortable"[^>]*>.*?</thead>', html, re.S)
    if sortable:
        heads = re.findall(r"<th[^>]*>(.*?)</th>", sortable.group(0), re.S)
        if not all('<button type="button" class="sort-button"' in h for h in heads):
            found.append("a sortable column header that is not a button")
    return found


@pytest.fixture
def site(client, app, people, session_factory):
    ids = seed_board(session_factory, analysed=2, unanalysed=1, monte_carlo=True)
    csrf = log_in(client, app, people.ids["admin"])
    return client, csrf, {"product_id": ids["product_id"], "board_id": ids["board_id"],
                          "rail_id": ids["rail_ids"][0], "part_id": ids["part_id"],
                          "team_id": people.team_ids["alpha"], "user_id": people.ids["designer"], "n": 1}, ids


def test_every_page_is_labelled_ordered_and_says_its_verdicts(site, app):
    client, csrf, values, ids = site
    routes = page_routes(app)
    assert {"/", "/boards/{board_id}", "/rails/{rail_id}", "/parts/{part_id}"} <= set(routes) and len(routes) >= 11
    urls = [fill(p, values) for p in routes]
    urls += [f"/rails/{ids['rail_ids'][2]}", f"/rails/{ids['rail_ids'][1]}",  # no result; no Monte Carlo
             f"/boards/{ids['board_id']}/rails/new?copy_from={ids['rail_ids'][0]}",
             f"/boards/{ids['board_id']}?verdict=fail", f"/rails/{ids['rail_ids'][0]}/history?from_n=1&to_n=1"]
    report = {}
    anonymous = client.__class__(client.app)
    login = anonymous.get("/login")
    assert login.status_code == 200 and problems_of(login.text) == []
    for url in urls:
        r = client.get(url)
        assert r.status_code == 200, f"{url}: {r.status_code} {r.text[:300]}"
        assert r.headers["content-type"].startswith("text/html"), url
        if problems := problems_of(r.text):
            report[url] = problems
    assert report == {}


def test_pages_in_their_error_states_are_accessible_too(site):
    client, csrf, values, ids = site
    form = form_from_document(normalize_document(rail_doc("X")))
    form.update({"csrf_token": csrf, "part": f"part:{ids['part_id']}", "load.c_nom": "-1 uF", "supply.v_max": "x"})
    rail_errors = client.post(f"/boards/{ids['board_id']}/rails/new", data=form)
    stale = {**form, "name": "RAIL_0", "load.c_nom": "1 mF", "supply.v_max": "12.6 V", "base_revision": "1"}
    client.post(f"/rails/{ids['rail_ids'][0]}/edit", data={**stale, "load.c_nom": "2 mF"})
    conflict = client.post(f"/rails/{ids['rail_ids'][0]}/edit", data=stale)
    part_errors = client.post("/parts/new", data={"csrf_token": csrf, "name": "", "soa.curves[0].points": "1"})
    assert (rail_errors.status_code, conflict.status_code, part_errors.status_code) == (422, 409, 422)
    for r in (rail_errors, conflict, part_errors):
        assert problems_of(r.text) == []


def test_the_checker_finds_what_it_is_for():
    bad = ('<h2>Start</h2><h4>Deep</h4><input name="q" type="text"><span class="verdict verdict-fail"></span>'
           '<div onclick="go()">x</div><button></button>')
    found = " | ".join(problems_of(bad))
    for expected in ("has no label", "first heading is not an h1", "heading level skipped",
                     "verdict without its word", "click-only", "button without text"):
        assert expected in found

"""Helpers of the page tests: a seeded board with analysed rails, logging a test client in."""

from __future__ import annotations

from html.parser import HTMLParser

from server.services import catalog, parts, rail_edits, results
from server.services.access import Actor
from server.services.users import get_user_by_name
from server.worker import run_analysis
from tests.factories import fet_doc, rail_doc


def actor_of(session, username: str) -> Actor:
    return Actor.for_user(get_user_by_name(session=session, username=username))


def analyse_now(session, revision, *, monte_carlo: int = 0) -> dict:
    """Compute and store a revision's result in this process (no worker needed)."""
    options = {**results.NOMINAL_OPTIONS, "monte_carlo": monte_carlo}
    result = run_analysis(revision.document, results.normalize_options(options))
    results.store_result(session, sha256=revision.sha256, options=options, result=result, duration_s=0.01)
    session.commit()
    return result


def seed_board(session_factory, *, analysed: int = 2, unanalysed: int = 1, monte_carlo: bool = False) -> dict:
    """A product, a board, a library part and rails (some analysed, some not), owned by team alpha."""
    with session_factory() as s:
        designer = actor_of(s, "designer")
        product = catalog.create_product(session=s, actor=designer, name="Tideline buoy")
        board = catalog.create_board(session=s, actor=designer, product_id=product.id, name="Power", revision="C")
        part = parts.create_part(session=s, actor=designer, document=fet_doc("Test N30 library"), message="entered")
        ids = []
        for k in range(analysed + unanalysed):
            doc = rail_doc(f"RAIL_{k}", load={"c_nom": f"{330 + 100 * k}uF"})
            doc.pop("fet")
            rail, rev = rail_edits.create_rail(session=s, actor=designer, board_id=board.id, document=doc,
                                          part=rail_edits.PartRef(part.part_id), message="first entry")
            if k < analysed:
                analyse_now(s, rev)
                if monte_carlo and k == 0:
                    analyse_now(s, rev, monte_carlo=200)
            ids.append(rail.id)
        return {"product_id": product.id, "board_id": board.id, "part_id": part.part_id, "rail_ids": ids}


def log_in(client, app, user_id: int) -> str:
    """Set the signed session cookie on ``client``; returns the session's CSRF token."""
    value, csrf = app.state.session_cookie.dump(user_id)
    client.cookies.set("railsign_session", value)
    return csrf


class Page(HTMLParser):
    """A parsed page: its headings, form controls with their labels, and verdict badges."""

    VOID = {"input", "br", "img", "meta", "link", "hr", "source", "area", "col", "wbr"}

    def __init__(self, html: str) -> None:
        super().__init__()
        self.headings: list[tuple[int, str]] = []
        self.controls: list[dict] = []
        self.label_for: set[str] = set()
        self.ids: list[str] = []
        self.verdicts: list[str] = []
        self.buttons: list[dict] = []
        self.clickables: list[tuple[str, dict]] = []
        self._stack: list[tuple[str, dict]] = []
        self._text: dict[int, list[str]] = {}
        self.feed(html)

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if a.get("id"):
            self.ids.append(a["id"])
        if tag == "label" and a.get("for"):
            self.label_for.add(a["for"])
        in_label = any(t == "label" for t, _ in self._stack)
        if tag in ("input", "select", "textarea") and a.get("type") not in ("hidden", "submit", "button"):
            self.controls.append({"tag": tag, "attrs": a, "wrapped": in_label})
        if "onclick" in a or "onmousedown" in a:
            self.clickables.append((tag, a))
        if tag in self.VOID:
            return
        self._stack.append((tag, a))
        self._text[len(self._stack)] = []

    def handle_endtag(self, tag):
        if tag in self.VOID:
            return
        while self._stack:
            t, a = self._stack.pop()
            text = " ".join("".join(self._text.pop(len(self._stack) + 1, [])).split())
            if self._stack:
                self._text.setdefault(len(self._stack), []).append(text + " ")
            if t in ("h1", "h2", "h3", "h4", "h5", "h6"):
                self.headings.append((int(t[1]), text))
            if "verdict" in (a.get("class") or "").split():
                self.verdicts.append(text)
            if t == "button":
                self.buttons.append({"attrs": a, "text": text})
            if t == tag:
                break

    def handle_data(self, data):
        if self._stack:
            self._text.setdefault(len(self._stack), []).append(data)

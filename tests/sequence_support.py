"""A product with one board and named rails for the sequence API tests."""

from __future__ import annotations

from tests.factories import rail_doc


def make_board(client, people, product: str, names: tuple[str, ...]) -> dict:
    """A product ``product`` with a board "Main" holding a rail per name (the designer's); the board's
    answer with ``rails`` (name to answer) and ``url`` (its sequence)."""
    h = people.headers("designer")
    made = client.post("/api/v1/products", json={"name": product}, headers=h)
    board = client.post("/api/v1/boards", json={"product_id": made.json()["id"], "name": "Main"}, headers=h)
    assert board.status_code == 201, board.text
    rails = {}
    for name in names:
        r = client.post("/api/v1/rails", json={"board_id": board.json()["id"], "document": rail_doc(name=name)},
                        headers=h)
        assert r.status_code == 201, r.text
        rails[name] = r.json()
    return {**board.json(), "rails": rails, "url": f"/api/v1/boards/{board.json()['id']}/sequence"}

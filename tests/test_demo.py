"""The demo scenario: every switch mode and load model, and every verdict, on both engines."""

from __future__ import annotations

from sqlalchemy import func, select

from server.analysis import analyze_rail
from server.demo import BOARDS, DEMO_USERS, seed_if_empty
from server.models import Board, Part, Product, Rail, RailRevision, User
from server.services import reviews
from server.services.access import Actor
from server.services.users import get_user_by_name
from tests.job_support import run_queued_jobs


def test_demo_covers_every_mode_and_load_model():
    docs = [doc for _, _, rails in BOARDS for doc, _ in rails]
    assert len(BOARDS) == 3 and 10 <= len(docs) <= 17
    assert {d["switch"]["mode"] for d in docs} == {"hard", "slew", "current_limit", "power_limit"}
    assert {d["load"]["model"] for d in docs} == {"none", "resistive", "constant_current", "constant_power"}


def test_demo_seeds_once_and_shows_every_verdict(session_factory):
    with session_factory() as s:
        assert seed_if_empty(s) is True
        assert seed_if_empty(s) is False
        assert s.scalar(select(func.count()).select_from(Product)) == 1
        assert s.scalar(select(func.count()).select_from(Board)) == 3
        assert s.scalar(select(func.count()).select_from(Part)) >= 3
        assert s.scalar(select(func.count()).select_from(User)) == len(DEMO_USERS)
        rails = s.scalars(select(Rail)).all()
        heads = [s.scalar(select(RailRevision).where(RailRevision.rail_id == r.id, RailRevision.n == r.head_n))
                 for r in rails]
    assert all(h.part_revision_id is not None for h in heads)  # every demo rail uses a library part
    verdicts = {analyze_rail(h.document, headroom=False)["verdict"] for h in heads}
    assert {"pass", "marginal", "fail"} <= verdicts


def test_demo_reviewers_have_a_queue(session_factory):
    with session_factory() as s:
        seed_if_empty(s)
        queues = {}
        for name in ("ravi", "rosa"):
            actor = Actor.for_user(get_user_by_name(session=s, username=name))
            q = reviews.review_queue(session=s, actor=actor)
            queues[name] = ([e["rail"]["name"] for e in q["assigned"]], [e["rail"]["name"] for e in q["team"]])
    assert sorted(queues["ravi"][0]) == ["FAN_24V", "PSE_PORT_24V", "VIN_24V_HOTSWAP"]
    assert queues["rosa"][0] == ["SOM_12V"]
    assert sorted(queues["ravi"][1]) == sorted(queues["rosa"][1]) == ["CAMERA_12V", "LIDAR_12V", "MODEM_12V"]


def test_demo_has_a_board_sequence_whose_harness_dips_below_its_uvlo(app, session_factory):
    # four rails on two supplies; the 12 V harness dips too far at the supply-low corner, the 5 V side holds
    from server.demo import SEQUENCES
    from server.models import BoardSequence
    from server.services import sequences

    doc = SEQUENCES["Sensor head"]
    assert len(doc["rails"]) >= 4 and len(doc["supplies"]) == 2
    with session_factory() as s:
        seed_if_empty(s)
    assert len(run_queued_jobs(app)) == 1  # the demo's save queued the sequence's analysis
    with session_factory() as s:
        seq = s.scalar(select(BoardSequence))
        result = sequences.current_result(s, seq).result
    failing = {(c["id"], c["subject"], c["corner"]) for c in result["checks"] if c["verdict"] == "fail"}
    assert ("supply_uvlo", "harness12", "supply_low") in failing
    # the lidar's own fault timer is too short for its 4.7 mF (its own analysis fails the same way): on the
    # board its timer turns it off before power-good, so the camera it enables never starts
    assert ("power_good", "lidar", "nominal") in failing and ("power_good", "camera", "nominal") in failing
    assert failing <= {("supply_uvlo", "harness12", "supply_low")} | {
        (cid, who, corner) for cid, who in (("power_good", "lidar"), ("power_good", "camera"),
                                            ("power_good_order", "board")) for corner in ("nominal", "supply_low")}
    lidar = next(c for c in result["checks"] if c["id"] == "power_good" and c["subject"] == "lidar")
    assert "fault timer turned it off" in lidar["reason"]
    # the 5 V side holds
    assert not {c for c in failing if c[1] in ("aux5", "sensors", "ir_led")}

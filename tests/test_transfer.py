"""Export and import lose nothing: revisions, part links, and what they say when a part is missing here."""

from __future__ import annotations

import copy
import hashlib
import shutil

import pytest
from sqlalchemy import func, select

from server import transfer
from server.bundle import BUNDLE_SCHEMA
from server.db import make_engine, make_sessionmaker
from server.demo import BOARDS, FETS, SEQUENCES, seed
from server.models import (Board, BoardSequence, BoardSequenceRevision, Job, JobKind, JobState, Part, Product, Rail,
                           RailRevision)
from server.schemas.rail import canonical_json, document_sha256
from server.services import parts, rail_edits, rails, sequences, users
from server.services.access import Actor
from server.services.errors import Conflict, Invalid
from tests.conftest import make_settings

DEMO_RAILS = sum(len(rails) for _, _, rails in BOARDS)  # the demo's one product holds every board


def _board_size(rail_name: str) -> int:
    return next(len(rails) for _, _, rails in BOARDS if rail_name in {doc["name"] for doc, _ in rails})

SYSTEM = Actor.system("transfer-tests")


def _heads(session) -> dict[str, RailRevision]:
    rows = session.execute(select(Rail, RailRevision).join(
        RailRevision, (RailRevision.rail_id == Rail.id) & (RailRevision.n == Rail.head_n))).all()
    return {rail.name: head for rail, head in rows}


def _revision_count(session) -> int:
    return session.scalar(select(func.count()).select_from(RailRevision))


@pytest.fixture(scope="module")
def demo_bundle(sqlite_template, tmp_path_factory) -> dict:
    """The demo product exported from an installation of its own (SQLite): every board, every rail."""
    path = tmp_path_factory.mktemp("demo-source") / "railsign.db"
    shutil.copy(sqlite_template, path)
    engine = make_engine(make_settings(f"sqlite:///{path}"))
    with make_sessionmaker(engine)() as session:
        seed(session)
        product_id = session.scalar(select(Product.id))
        bundle = transfer.export_product(session=session, actor=SYSTEM, product_id=product_id)
    engine.dispose()
    return bundle


def _fresh_installation(session) -> None:
    users.create_user(session=session, actor=SYSTEM, username="importer", role="designer", password=None,
                      teams=["elsewhere"])


def test_export_carries_the_part_and_the_revision_of_every_rail(session_factory):
    with session_factory() as s:
        seed(s)
        heads = _heads(s)
        product_id = s.scalar(select(Product.id))
        bundle = transfer.export_product(session=s, actor=SYSTEM, product_id=product_id)
        pinned = {name: rails.part_status(s, head) for name, head in heads.items()}
    assert bundle["schema"] == BUNDLE_SCHEMA
    entries = [e for board in bundle["boards"] for e in board["rails"]]
    assert len(entries) == len(heads) == DEMO_RAILS
    for entry in entries:
        name = entry["document"]["name"]
        assert entry["exported_from"] == {"revision": heads[name].n, "sha256": heads[name].sha256}
        assert document_sha256(entry["document"]) == heads[name].sha256
        assert entry["part"] == {"name": pinned[name]["name"], "revision": pinned[name]["pinned_revision"]}


def test_demo_round_trip_makes_no_revision_and_keeps_every_part_link(session_factory):
    with session_factory() as s:
        seed(s)
        before = {name: (h.n, h.sha256, h.part_revision_id) for name, h in _heads(s).items()}
        revisions = _revision_count(s)
        product_id = s.scalar(select(Product.id))
        board_ids = sorted({r.board_id for r in s.scalars(select(Rail))})
        files = [transfer.export_board(session=s, actor=SYSTEM, board_id=b) for b in board_ids]
        files.append(transfer.export_product(session=s, actor=SYSTEM, product_id=product_id))
        files += [transfer.export_rail(session=s, actor=SYSTEM, rail_id=r) for r in s.scalars(select(Rail.id))]
    reports = []
    for data in files:
        with session_factory() as s:
            reports.append(transfer.import_data(session=s, actor=SYSTEM, data=data))
    per_board = [len(rails) for _, _, rails in BOARDS]  # the demo's one product holds every board
    assert [r.counts()["unchanged"] for r in reports] == per_board + [sum(per_board)] + [1] * sum(per_board)
    assert all(r.created == r.updated == 0 and not r.not_linked for r in reports)
    assert all(r.linked == r.unchanged for r in reports)
    with session_factory() as s:
        assert _revision_count(s) == revisions
        after = {name: (h.n, h.sha256, h.part_revision_id) for name, h in _heads(s).items()}
    assert after == before
    assert all(part_rev is not None for _, _, part_rev in after.values())


def test_an_edited_rail_in_the_file_makes_one_revision_and_keeps_its_part(session_factory):
    with session_factory() as s:
        seed(s)
        board_id = s.scalar(select(Rail.board_id).where(Rail.name == "SOM_12V"))
        data = transfer.export_board(session=s, actor=SYSTEM, board_id=board_id)
        part_before = _heads(s)["SOM_12V"].part_revision_id
    entry = next(e for e in data["boards"][0]["rails"] if e["document"]["name"] == "SOM_12V")
    entry["document"]["load"]["c_nom"] = 560e-6
    with session_factory() as s:
        report = transfer.import_data(session=s, actor=SYSTEM, data=data, message="smaller bulk capacitor")
        head = _heads(s)["SOM_12V"]
    assert report.counts() == {"created": 0, "updated": 1, "unchanged": _board_size("SOM_12V") - 1}
    assert head.n == 2 and head.document["load"]["c_nom"] == 560e-6
    assert head.part_revision_id == part_before
    assert head.message == "smaller bulk capacitor"


def test_a_rail_saved_here_after_the_export_is_a_conflict_and_nothing_is_stored(session_factory):
    with session_factory() as s:
        seed(s)
        board_id = s.scalar(select(Rail.board_id).where(Rail.name == "SOM_12V"))
        old = transfer.export_board(session=s, actor=SYSTEM, board_id=board_id)
        rail = s.scalar(select(Rail).where(Rail.name == "SOM_12V"))
        doc = copy.deepcopy(_heads(s)["SOM_12V"].document)
        doc["load"]["esr"] = 0.02
        rail_edits.save_rail(session=s, actor=SYSTEM, rail_id=rail.id, document=doc, base_n=1, message="here")
    for entry in old["boards"][0]["rails"]:  # an offline edit of every rail in the old file
        entry["document"]["environment"]["t_ambient"] = 50.0
    with session_factory() as s:
        revisions = _revision_count(s)
        with pytest.raises(Conflict) as caught:
            transfer.import_data(session=s, actor=SYSTEM, data=old)
    assert "SOM_12V on Compute carrier A was exported from its revision 1" in caught.value.message
    assert "now revision 2" in caught.value.message and "Nothing was imported" in caught.value.message
    with session_factory() as s:
        assert _revision_count(s) == revisions


def test_into_another_installation_with_the_parts_relinks_them_by_name_and_revision(session_factory, demo_bundle):
    with session_factory() as s:
        _fresh_installation(s)
        for fet in FETS:
            parts.create_part(session=s, actor=SYSTEM, document=fet)
        report = transfer.import_data(session=s, actor=SYSTEM, data=demo_bundle, team="elsewhere")
        assert report.counts() == {"created": DEMO_RAILS, "updated": 0, "unchanged": 0}
        assert report.linked == DEMO_RAILS and report.not_linked == []
        heads = _heads(s)
        linked = {name: rails.part_status(s, h) for name, h in heads.items()}
        again = transfer.import_data(session=s, actor=SYSTEM, data=demo_bundle)
    entries = {e["document"]["name"]: e for b in demo_bundle["boards"] for e in b["rails"]}
    for name, head in heads.items():
        assert head.sha256 == entries[name]["exported_from"]["sha256"]
        assert linked[name]["name"] == entries[name]["part"]["name"]
        assert linked[name]["pinned_revision"] == entries[name]["part"]["revision"]
    assert again.counts() == {"created": 0, "updated": 0, "unchanged": DEMO_RAILS} and again.linked == DEMO_RAILS


def test_into_another_installation_without_the_parts_says_which_and_keeps_the_fets(session_factory, demo_bundle):
    with session_factory() as s:
        _fresh_installation(s)
        with pytest.raises(Invalid) as refused:
            transfer.import_data(session=s, actor=SYSTEM, data=demo_bundle, team="elsewhere", require_parts=True)
        assert s.scalar(select(func.count()).select_from(Product)) == 0  # nothing half-done
        report = transfer.import_data(session=s, actor=SYSTEM, data=demo_bundle, team="elsewhere")
        heads = _heads(s)
    assert "nothing was imported" in refused.value.message
    assert "part 'BW-N30L5 (demo)' revision 1 is not in this library" in refused.value.message
    assert report.counts()["created"] == DEMO_RAILS and report.linked == 0
    missing = {n.part.name for n in report.not_linked}
    assert missing == {FETS[part]["name"] for _, _, rails in BOARDS for _, part in rails}  # the parts the rails use
    lines = report.lines()
    assert lines[1] == f"0 of {DEMO_RAILS} rails linked to a library part"
    assert any(line.startswith("not linked: part 'BW-N100H26 (demo)' revision 1 is not in this library. These rails "
                               "use the FET in their own document, not a library part: VIN_24V_HOTSWAP on Power "
                               "entry B") for line in lines)
    entries = {e["document"]["name"]: e for b in demo_bundle["boards"] for e in b["rails"]}
    assert all(h.part_revision_id is None and h.sha256 == entries[n]["exported_from"]["sha256"]
               for n, h in heads.items())


def test_a_part_that_differs_here_is_not_linked_and_says_so(session_factory, demo_bundle):
    with session_factory() as s:
        _fresh_installation(s)
        for fet in FETS:
            differs = {**fet, "rds_on": fet["rds_on"] * 1.5}
            if "rds_on_max" in fet:  # the maximum stays at or above the typical
                differs["rds_on_max"] = fet["rds_on_max"] * 1.5
            parts.create_part(session=s, actor=SYSTEM, document=differs)
        report = transfer.import_data(session=s, actor=SYSTEM, data=demo_bundle, team="elsewhere")
        # the library moves on to a revision 2 with the exported FET: a new export of that revision links again
        part = s.scalar(select(Part).where(Part.name == FETS[2]["name"]))
        parts.save_part(session=s, actor=SYSTEM, part_id=part.id, document=FETS[2], base_n=1)
    assert report.linked == 0
    assert {n.reason for n in report.not_linked} == {"differs here from the FET in the file"}
    moved = copy.deepcopy(demo_bundle)
    for board in moved["boards"]:
        for entry in board["rails"]:
            if entry["part"]["name"] == FETS[2]["name"]:
                entry["part"]["revision"] = 2
    with session_factory() as s:
        report = transfer.import_data(session=s, actor=SYSTEM, data=moved)
        head = _heads(s)["VIN_24V_HOTSWAP"]
        status = rails.part_status(s, head)
    assert report.counts() == {"created": 0, "updated": 1, "unchanged": DEMO_RAILS - 1}  # only the link changes
    assert head.n == 2 and status["name"] == FETS[2]["name"] and status["pinned_revision"] == 2
    assert FETS[2]["name"] not in {n.part.name for n in report.not_linked}
    assert {n.reason for n in report.not_linked} == {"differs here from the FET in the file"}


def test_a_document_without_a_part_keeps_the_rails_present_part(session_factory):
    with session_factory() as s:
        seed(s)
        head = _heads(s)["HEATER_24V"]
        board_id = s.scalar(select(Rail.board_id).where(Rail.name == "HEATER_24V"))
        report = transfer.import_data(session=s, actor=SYSTEM, data=head.document, board_id=board_id)
        assert report.counts() == {"created": 0, "updated": 0, "unchanged": 1} and report.linked == 1
        assert _heads(s)["HEATER_24V"].n == 1


def test_two_rails_of_the_same_name_on_a_board_are_refused(session_factory, demo_bundle):
    data = copy.deepcopy(demo_bundle)
    data["boards"][0]["rails"].append(copy.deepcopy(data["boards"][0]["rails"][0]))
    with session_factory() as s:
        _fresh_installation(s)
        with pytest.raises(Invalid, match="two rails named"):
            transfer.import_data(session=s, actor=SYSTEM, data=data, team="elsewhere")
        assert s.scalar(select(func.count()).select_from(Product)) == 0


def test_a_bad_entry_names_its_field(session_factory, demo_bundle):
    data = copy.deepcopy(demo_bundle)
    data["boards"][1]["rails"][2]["part"] = {"name": "x", "revision": 0}
    data["boards"][0]["rails"][1]["document"]["load"]["c_nom"] = -1
    with session_factory() as s:
        with pytest.raises(Invalid) as caught:
            transfer.import_data(session=s, actor=SYSTEM, data=data, team="elsewhere")
    assert [d["field"] for d in caught.value.details] == ["boards[1].rails[2].part.revision"]
    data["boards"][1]["rails"][2]["part"]["revision"] = 1
    with session_factory() as s:
        with pytest.raises(Invalid) as caught:
            transfer.import_data(session=s, actor=SYSTEM, data=data, team="elsewhere")
    assert [d["field"] for d in caught.value.details] == ["boards[0].rails[1].document.load.c_nom"]


# --- the power-up sequence of a board travels with its rails ---------------------------------------


def _sequence_heads(session) -> dict[str, BoardSequenceRevision]:
    """Board name -> the head revision of its sequence."""
    rows = session.execute(select(Board.name, BoardSequenceRevision)
                           .join(BoardSequence, BoardSequence.board_id == Board.id)
                           .join(BoardSequenceRevision, (BoardSequenceRevision.sequence_id == BoardSequence.id)
                                 & (BoardSequenceRevision.n == BoardSequence.head_n))).all()
    return {name: rev for name, rev in rows}


def _sha(document) -> str:
    return hashlib.sha256(canonical_json(document).encode()).hexdigest()


def _sequence_board(bundle: dict) -> int:
    return next(k for k, b in enumerate(bundle["boards"]) if "sequence" in b)


def test_export_carries_the_head_sequence_of_a_whole_board_only(session_factory):
    with session_factory() as s:
        seed(s)
        heads = _sequence_heads(s)
        product_id = s.scalar(select(Product.id))
        board_id = s.scalar(select(Board.id).where(Board.name == "Sensor head"))
        product = transfer.export_product(session=s, actor=SYSTEM, product_id=product_id)
        board = transfer.export_board(session=s, actor=SYSTEM, board_id=board_id)
        rail = transfer.export_rail(session=s, actor=SYSTEM, rail_id=s.scalar(
            select(Rail.id).where(Rail.name == "LIDAR_12V")))
    assert set(heads) == set(SEQUENCES) == {"Sensor head"}
    with_sequence = [b["name"] for b in product["boards"] if "sequence" in b]
    assert with_sequence == ["Sensor head"]  # a board without a sequence has no key
    for data in (product, board):
        document = data["boards"][_sequence_board(data)]["sequence"]
        assert document == heads["Sensor head"].document
        assert _sha(document) == heads["Sensor head"].sha256
    assert "sequence" not in rail["boards"][0]  # one rail of the board: its sequence would name absent rails


def test_demo_sequence_round_trips_into_an_empty_installation_and_its_job_is_queued(session_factory, demo_bundle):
    exported = demo_bundle["boards"][_sequence_board(demo_bundle)]["sequence"]
    with session_factory() as s:
        _fresh_installation(s)
        assert s.scalar(select(func.count()).select_from(BoardSequence)) == 0
        report = transfer.import_data(session=s, actor=SYSTEM, data=demo_bundle, team="elsewhere")
        head = _sequence_heads(s)["Sensor head"]
        board_id = s.scalar(select(Board.id).where(Board.name == "Sensor head"))
        seq = sequences.get_sequence(session=s, actor=SYSTEM, board_id=board_id)
        key = sequences.sequence_dict(s, seq)["inputs_sha256"]
        jobs = s.scalars(select(Job).where(Job.kind == JobKind.sequence.value, Job.board_id == board_id)).all()
        again = transfer.import_data(session=s, actor=SYSTEM, data=demo_bundle)
        revisions = s.scalar(select(func.count()).select_from(BoardSequenceRevision))
    assert head.n == 1 and head.document == exported
    assert head.sha256 == _sha(exported)  # the same document, byte for byte in canonical form
    assert [(j.state, j.sha256, j.revision_n) for j in jobs] == [(JobState.queued.value, key, 1)]
    assert report.sequences_saved == ["board 'Sensor head' revision C"] and report.sequences_unchanged == []
    assert report.lines()[-1] == "power-up sequence saved as a new revision: board 'Sensor head' revision C."
    assert again.sequences_unchanged == ["board 'Sensor head' revision C"] and again.sequences_saved == []
    assert revisions == 1


def test_an_edited_sequence_in_the_file_makes_one_sequence_revision(session_factory):
    with session_factory() as s:
        seed(s)
        board_id = s.scalar(select(Board.id).where(Board.name == "Sensor head"))
        data = transfer.export_board(session=s, actor=SYSTEM, board_id=board_id)
    data["boards"][0]["sequence"]["rails"][1]["enable"]["delay"] = 8e-3
    with session_factory() as s:
        report = transfer.import_data(session=s, actor=SYSTEM, data=data, message="camera later")
        head = _sequence_heads(s)["Sensor head"]
    assert report.counts()["unchanged"] == _board_size("LIDAR_12V")
    assert head.n == 2 and head.message == "camera later"
    assert head.document["rails"][1]["enable"]["delay"] == 8e-3


def test_a_sequence_that_names_a_missing_rail_refuses_the_import_and_stores_nothing(session_factory, demo_bundle):
    data = copy.deepcopy(demo_bundle)
    b = _sequence_board(data)
    data["boards"][b]["sequence"]["rails"][1]["ref"] = "CAMERA_5V"
    with session_factory() as s:
        _fresh_installation(s)
        with pytest.raises(Invalid) as caught:
            transfer.import_data(session=s, actor=SYSTEM, data=data, team="elsewhere")
        assert s.scalar(select(func.count()).select_from(Product)) == 0  # nothing half-done, as for a bad rail
        assert s.scalar(select(func.count()).select_from(Rail)) == 0
        assert s.scalar(select(func.count()).select_from(BoardSequence)) == 0
    assert [d["field"] for d in caught.value.details] == [f"boards[{b}].sequence.rails[1].ref"]
    assert "the power-up sequence of board 'Sensor head' revision C cannot be read" in caught.value.message
    assert "names no rail known here ('CAMERA_5V')" in caught.value.message
    assert "Nothing was imported" in caught.value.message


def test_a_sequence_is_read_with_the_rails_already_on_the_board(session_factory):
    """A board file with fewer rails than the sequence names: the board's rails here make up the rest."""
    with session_factory() as s:
        seed(s)
        board_id = s.scalar(select(Board.id).where(Board.name == "Sensor head"))
        data = transfer.export_board(session=s, actor=SYSTEM, board_id=board_id)
    data["boards"][0]["rails"] = [e for e in data["boards"][0]["rails"] if e["document"]["name"] == "LIDAR_12V"]
    data["boards"][0]["sequence"]["name"] = "Sensor head power-up, renamed"
    with session_factory() as s:
        report = transfer.import_data(session=s, actor=SYSTEM, data=data)
        head = _sequence_heads(s)["Sensor head"]
    assert report.counts() == {"created": 0, "updated": 0, "unchanged": 1}
    assert head.n == 2 and head.document["name"] == "Sensor head power-up, renamed"


def test_an_older_bundle_version_with_a_sequence_is_refused_and_without_one_is_read(session_factory, demo_bundle):
    data = copy.deepcopy(demo_bundle)
    data["schema"] = "railsign.bundle/2"
    b = _sequence_board(data)
    with session_factory() as s:
        _fresh_installation(s)
        with pytest.raises(Invalid) as caught:
            transfer.import_data(session=s, actor=SYSTEM, data=data, team="elsewhere")
        assert [d["field"] for d in caught.value.details] == [f"boards[{b}].sequence"]
        del data["boards"][b]["sequence"]
        report = transfer.import_data(session=s, actor=SYSTEM, data=data, team="elsewhere")
        assert s.scalar(select(func.count()).select_from(BoardSequence)) == 0
    assert BUNDLE_SCHEMA == "railsign.bundle/3" and "is read from railsign.bundle/3 on" in caught.value.message
    assert report.created == DEMO_RAILS and report.sequences_saved == []

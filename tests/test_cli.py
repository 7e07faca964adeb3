"""The command line: export/import round trip, exit codes and messages for bad input."""

from __future__ import annotations

import json
import subprocess
import sys

import pytest

from server.__main__ import EXIT_BAD_INPUT, EXIT_NO_DATABASE, build_parser, main
from tests.conftest import TEST_SECRET
from tests.factories import rail_doc


@pytest.fixture
def cli_env(monkeypatch, database_url):
    monkeypatch.setenv("RAILSIGN_DATABASE_URL", database_url)
    monkeypatch.setenv("RAILSIGN_SECRET_KEY", TEST_SECRET)
    return database_url


@pytest.fixture
def board_id(cli_env, tmp_path, capsys) -> int:
    bundle = {"schema": "railsign.bundle/1", "product": {"name": "CLI gateway"},
              "boards": [{"name": "Main", "revision": "A", "rails": [rail_doc("VOUT_A"), rail_doc("VOUT_B")]}]}
    path = tmp_path / "bundle.json"
    path.write_text(json.dumps(bundle))
    assert main(["user", "add", "cli-admin", "--role", "admin", "--team", "alpha"]) == 0
    assert main(["import", str(path), "--team", "alpha"]) == 0
    assert "2 created" in capsys.readouterr().out
    from server.db import make_engine, make_sessionmaker
    from server.models import Board
    from tests.conftest import make_settings

    engine = make_engine(make_settings(cli_env))
    with make_sessionmaker(engine)() as session:
        board = session.query(Board).one()
        bid = board.id
    engine.dispose()
    return bid


def test_import_then_export_round_trips_the_documents(board_id, tmp_path, capsys):
    out = tmp_path / "board.json"
    assert main(["export", "--board", str(board_id), "-o", str(out)]) == 0
    bundle = json.loads(out.read_text())
    assert bundle["schema"] == "railsign.bundle/3"
    docs = {e["document"]["name"]: e["document"] for e in bundle["boards"][0]["rails"]}
    assert set(docs) == {"VOUT_A", "VOUT_B"}
    assert docs["VOUT_A"]["load"]["c_nom"] == pytest.approx(680e-6)
    assert bundle["boards"][0]["rails"][0]["exported_from"]["revision"] == 1
    # Importing the same file again changes nothing; a changed document makes a new revision.
    assert main(["import", str(out)]) == 0
    assert "2 unchanged" in capsys.readouterr().out
    bundle["boards"][0]["rails"][0]["document"]["load"]["c_nom"] = 1e-3
    out.write_text(json.dumps(bundle))
    assert main(["import", str(out)]) == 0
    assert "1 updated, 1 unchanged" in capsys.readouterr().out


def test_single_document_import_needs_a_board(board_id, tmp_path, capsys):
    path = tmp_path / "rail.json"
    path.write_text(json.dumps(rail_doc("VOUT_C")))
    assert main(["import", str(path)]) == EXIT_BAD_INPUT
    assert "--board" in capsys.readouterr().err
    assert main(["import", str(path), "--board", str(board_id)]) == 0


def test_bad_document_in_a_bundle_stores_nothing(board_id, tmp_path, capsys):
    bad = rail_doc("VOUT_BAD")
    bad["load"]["c_nom"] = "-1 uF"
    bundle = {"schema": "railsign.bundle/1", "product": {"name": "CLI gateway"},
              "boards": [{"name": "Main", "revision": "A", "rails": [rail_doc("VOUT_NEW"), bad]}]}
    path = tmp_path / "bad.json"
    path.write_text(json.dumps(bundle))
    assert main(["import", str(path)]) == EXIT_BAD_INPUT
    err = capsys.readouterr().err
    assert "boards[0].rails[1].load.c_nom" in err
    out = tmp_path / "after.json"
    assert main(["export", "--board", str(board_id), "-o", str(out)]) == 0
    names = {e["document"]["name"] for e in json.loads(out.read_text())["boards"][0]["rails"]}
    assert names == {"VOUT_A", "VOUT_B"}


# Designs that cannot work are analysed and fail their checks; they are never bad input (exit 2).
CANNOT_WORK = {
    "load turns on above the supply minimum": {"load": {"model": "constant_current", "i_nom": 1.0, "v_on": 11.5}},
    "upstream UVLO above the supply minimum": {"supply": {"uvlo": 12.0}},
    "current limit below the load current": {"switch": {"i_limit": "1 A"}, "load": {"i_nom": 3.0}},
}


def test_designs_that_cannot_work_are_imported_not_refused(board_id, tmp_path, capsys):
    bundle = {"schema": "railsign.bundle/1", "product": {"name": "CLI gateway"},
              "boards": [{"name": "Main", "revision": "A",
                          "rails": [rail_doc(f"VOUT_X{k}", **sections)
                                    for k, sections in enumerate(CANNOT_WORK.values())]}]}
    path = tmp_path / "cannot_work.json"
    path.write_text(json.dumps(bundle))
    assert main(["import", str(path)]) == 0, capsys.readouterr().err
    assert "3 created" in capsys.readouterr().out


@pytest.mark.parametrize("sections", list(CANNOT_WORK.values()), ids=list(CANNOT_WORK))
def test_designs_that_cannot_work_are_analysed_with_failing_checks(tmp_path, capsys, sections):
    from server.__main__ import EXIT_FAILING_CHECK

    path = tmp_path / "rail.json"
    path.write_text(json.dumps(rail_doc(**sections)))
    assert main(["analyze", str(path)]) == EXIT_FAILING_CHECK, capsys.readouterr().err


def test_a_bad_document_is_named_in_words_then_by_path(board_id, tmp_path, capsys):
    bad = rail_doc("VOUT_BAD", supply={"v_min": 0})
    path = tmp_path / "bad.json"
    path.write_text(json.dumps(bad))
    assert main(["import", str(path), "--board", str(board_id)]) == EXIT_BAD_INPUT
    assert "Supply minimum (supply.v_min): must be above 0 V" in capsys.readouterr().err


def _id_of(database_url: str, model, name: str) -> int:
    from server.db import make_engine, make_sessionmaker
    from tests.conftest import make_settings

    engine = make_engine(make_settings(database_url))
    with make_sessionmaker(engine)() as session:
        row_id = session.query(model.id).filter(model.name == name).scalar()
    engine.dispose()
    return row_id


def test_one_exported_rail_goes_back_to_its_board_or_to_another_one(board_id, cli_env, tmp_path, capsys):
    out = tmp_path / "rail.json"
    from server.models import Board, Rail

    assert main(["export", "--rail", str(_id_of(cli_env, Rail, "VOUT_A")), "-o", str(out)]) == 0
    assert main(["import", str(out)]) == 0
    assert capsys.readouterr().out.splitlines() == ["0 created, 0 updated, 1 unchanged",
                                                    "0 of 1 rails linked to a library part"]
    # the one-rail file is also a rail file for analyze
    assert main(["analyze", str(out)]) == 1
    capsys.readouterr()
    bundle = {"schema": "railsign.bundle/2", "product": {"name": "CLI gateway"},
              "boards": [{"name": "Spare", "revision": "B", "rails": []}]}
    spare = tmp_path / "spare.json"
    spare.write_text(json.dumps(bundle))
    assert main(["import", str(spare)]) == 0
    assert main(["import", str(out), "--board", str(_id_of(cli_env, Board, "Spare"))]) == 0
    assert "1 created, 0 updated, 0 unchanged" in capsys.readouterr().out


def test_export_and_import_carry_a_boards_sequence_without_options(cli_env, tmp_path, capsys):
    from server.db import make_engine, make_sessionmaker
    from server.demo import seed
    from server.models import Board
    from tests.conftest import make_settings

    engine = make_engine(make_settings(cli_env))
    with make_sessionmaker(engine)() as session:
        seed(session)
    engine.dispose()
    board = _id_of(cli_env, Board, "Sensor head")
    out = tmp_path / "sensor-head.json"
    assert main(["export", "--board", str(board), "-o", str(out)]) == 0
    bundle = json.loads(out.read_text())
    sequence = bundle["boards"][0]["sequence"]
    assert [r["ref"] for r in sequence["rails"]] == ["LIDAR_12V", "CAMERA_12V", "SENSORS_5V", "IR_LED_5V"]
    capsys.readouterr()
    assert main(["import", str(out)]) == 0
    assert "power-up sequence unchanged: board 'Sensor head' revision C." in capsys.readouterr().out.splitlines()
    sequence["rails"][1]["enable"]["delay"] = 8e-3
    out.write_text(json.dumps(bundle))
    assert main(["import", str(out)]) == 0
    assert "power-up sequence saved as a new revision: board 'Sensor head' revision C." in \
        capsys.readouterr().out.splitlines()
    sequence["rails"][1]["ref"] = "NO_SUCH_RAIL"
    out.write_text(json.dumps(bundle))
    assert main(["import", str(out)]) == EXIT_BAD_INPUT
    err = capsys.readouterr().err
    assert "board 'Sensor head' revision C" in err and "boards[0].sequence.rails[1].ref" in err


@pytest.mark.parametrize("args,words", [
    (["import", "no-such-file.json"], "no such file"),
    (["export", "--rail", "999"], "no rail 999"),
])
def test_bad_input_exits_2_with_a_message(cli_env, args, words, capsys):
    assert main(args) == EXIT_BAD_INPUT
    assert words in capsys.readouterr().err


def test_invalid_json_file_exits_2(cli_env, tmp_path, capsys):
    path = tmp_path / "broken.json"
    path.write_text("{ not json")
    assert main(["import", str(path), "--board", "1"]) == EXIT_BAD_INPUT
    assert "not valid JSON" in capsys.readouterr().err


def test_unreachable_database_exits_3(monkeypatch, capsys):
    monkeypatch.setenv("RAILSIGN_DATABASE_URL", "postgresql+psycopg://nobody@127.0.0.1:1/none")
    assert main(["migrate"]) == EXIT_NO_DATABASE
    assert "cannot reach the database" in capsys.readouterr().err


def test_unknown_database_scheme_exits_2(monkeypatch, capsys):
    monkeypatch.setenv("RAILSIGN_DATABASE_URL", "mysql://somewhere/db")
    assert main(["migrate"]) == EXIT_BAD_INPUT
    assert "RAILSIGN_DATABASE_URL" in capsys.readouterr().err


def test_bad_arguments_exit_2_through_the_console_entry():
    # `python -m server` is the same program as the `railsign` console script.
    proc = subprocess.run([sys.executable, "-m", "server", "export"], capture_output=True, text=True)
    assert proc.returncode == 2
    assert "one of the arguments --rail --board --product is required" in proc.stderr
    proc = subprocess.run([sys.executable, "-m", "server", "--help"], capture_output=True, text=True)
    assert proc.returncode == 0
    for command in ("serve", "demo", "migrate", "export", "import"):
        assert command in proc.stdout


def test_serve_refuses_the_placeholder_secret(monkeypatch, tmp_path, capsys):
    monkeypatch.setenv("RAILSIGN_DATABASE_URL", f"sqlite:///{tmp_path / 'x.db'}")
    monkeypatch.delenv("RAILSIGN_SECRET_KEY", raising=False)
    assert main(["serve", "--port", "1"]) == EXIT_BAD_INPUT
    assert "RAILSIGN_SECRET_KEY" in capsys.readouterr().err


def test_parser_knows_every_documented_command():
    parser = build_parser()
    for argv in (["serve", "--host", "0.0.0.0", "--port", "9000", "--workers", "2"], ["demo"], ["migrate"],
                 ["user", "add", "x", "--role", "viewer", "--password-stdin"], ["token", "create", "x", "--label", "ci"]):
        assert parser.parse_args(argv).func is not None


# --- fit-zth: Foster stages from a Zth curve file, no database ---------------------------------------------

_ZTH_STAGES = [(0.05, 1e-5), (0.3, 3e-4), (0.6, 5e-3), (0.35, 8e-2)]


def _zth_csv(tmp_path, header: bool = True):
    # Source: Zth(t) = sum r_i (1 - exp(-t / tau_i)) of a Foster network (JEDEC JESD51-14, from memory)
    import math

    lines = ["t, Zth"] if header else []
    for k in range(37):
        t = 10 ** (-6 + k / 6)
        lines.append(f"{t!r}, {sum(r * (1 - math.exp(-t / tau)) for r, tau in _ZTH_STAGES)!r}")
    path = tmp_path / "zth.csv"
    path.write_text("\n".join(lines) + "\n")
    return path


def test_fit_zth_prints_the_stages_the_largest_error_and_the_board_stage(tmp_path, capsys):
    path = _zth_csv(tmp_path)
    assert main(["fit-zth", str(path), "--stages", "4", "--rth-ja", "40 K/W"]) == 0
    out = capsys.readouterr().out
    assert "fitted to 37 Zth points" in out and "Largest error over the points: 0.00%" in out
    assert "Board stage (mounting): r 38.7 K/W" in out and "tau 10 s (10 s when none is given" in out
    assert "common practice, no source" in out


def test_fit_zth_json_recovers_the_stages_and_reaches_r_th_junction_ambient(tmp_path, capsys):
    path = _zth_csv(tmp_path, header=False)
    assert main(["fit-zth", str(path), "--stages", "4", "--rth-ja", "40", "--board-tau", "20 s", "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    for got, (r, tau) in zip(data["stages"], _ZTH_STAGES):
        assert got["r"] == pytest.approx(r, rel=0.01) and got["tau"] == pytest.approx(tau, rel=0.01)
    assert data["board_stage"]["tau"] == 20.0 and not data["board_tau_default"]
    assert sum(s["r"] for s in data["zth"]) == pytest.approx(40.0, rel=1e-12)
    assert len(data["points"]) == 37 and data["largest_error"] < 0.01


@pytest.mark.parametrize("content, extra, words", [
    ("1e-3, 0.5\n1e-4, 0.6\n1e-2, 0.7\n0.1, 0.8\n", [], "fet.zth_points[1]"),       # t falls
    ("1e-3, 0.5\n1e-2, 0.4\n0.1, 0.8\n1, 0.9\n", [], "Zth must not fall"),
    ("1e-3, 0.5\n1e-2\n", [], "line 2: expected two values"),
    ("1e-3, 0.5\n1e-2, 0.6\n0.1, 0.8\n1, 0.9\n", ["--rth-ja", "0.5"], "fet.rth_ja"),
    ("1e-3, 0.5\n1e-2, 0.6\n0.1, 0.8\n1, 0.9\n", ["--rth-ja", "forty"], "--rth-ja"),
])
def test_fit_zth_bad_input_exits_2_naming_the_field(tmp_path, capsys, content, extra, words):
    path = tmp_path / "bad.csv"
    path.write_text(content)
    args = ["fit-zth", str(path), "--stages", "2", *(extra or ["--rth-ja", "40"])]
    assert main(args) == EXIT_BAD_INPUT
    assert words in capsys.readouterr().err


def test_fit_zth_takes_2_to_6_stages():
    with pytest.raises(SystemExit):
        build_parser().parse_args(["fit-zth", "x.csv", "--stages", "7", "--rth-ja", "40"])
    assert build_parser().parse_args(["fit-zth", "x.csv", "--stages", "6", "--rth-ja", "40"]).stages == 6

"""railsign bom-import: a BOM's capacitor lines as the rail document's load.bank, without a database."""

from __future__ import annotations

import json

from server.__main__ import EXIT_BAD_INPUT, main
from server.services.bom_import import parse_bom
from server.services.rails import normalize_document
from tests.factories import rail_doc

BOM = ("RefDes;Value;Dielectric;Voltage;Qty\n"
       "C401, C402;330u;Alu;25V;\n"
       "C410-C433;22uF;X7R;25 V;24\n"
       "C450;1u;Y5V;16V;1\n")


def test_bom_import_prints_the_bank_as_json_and_warns_on_stderr(tmp_path, capsys):
    path = tmp_path / "caps.csv"
    path.write_text(BOM, encoding="utf-8")
    assert main(["bom-import", str(path)]) == 0
    captured = capsys.readouterr()
    bank = json.loads(captured.out)
    assert bank == parse_bom(BOM).groups
    assert [g["count"] for g in bank] == [2, 24, 1] and bank[2]["dielectric"] == "other"
    assert "Y5V" in captured.err and "warning" in captured.err
    # what it prints is a bank the rail document takes
    doc = normalize_document(rail_doc("FROM_BOM", load={"c_nom": None, "c_tol": 0, "esr": 0, "bank": bank}))
    assert len(doc["load"]["bank"]) == 3


def test_bom_import_refuses_a_bad_line_naming_line_and_column(tmp_path, capsys):
    path = tmp_path / "bad.csv"
    path.write_text(BOM.replace(";24\n", ";24.5\n"), encoding="utf-8")
    assert main(["bom-import", str(path)]) == EXIT_BAD_INPUT
    captured = capsys.readouterr()
    assert captured.out == "" and "line 3, column count" in captured.err
    assert main(["bom-import", str(tmp_path / "missing.csv")]) == EXIT_BAD_INPUT

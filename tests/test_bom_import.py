"""The BOM import: a capacitor bank (the document's ``load.bank``) from the CSV lines of a net's capacitors."""

from __future__ import annotations

import pytest

from server.analysis.bank import MAX_BANK_GROUPS
from server.services.bom_import import BomProblem, count_refs, dielectric_id, parse_bom
from server.services.rails import normalize_document
from tests.factories import rail_doc


def test_a_plain_bom_gives_its_groups_in_si():
    bom = parse_bom("Refdes,Value,Dielectric,Rating,Qty\n"
                    "C401,330u,aluminium electrolytic,25V,1\n"
                    "\"C410-C433\",22uF,X7R,25 V,24\n")
    assert bom.errors == [] and bom.ok
    assert bom.groups == [
        {"refs": "C401", "count": 1, "c_nom": pytest.approx(330e-6), "c_tol": 0.0, "dielectric": "electrolytic",
         "v_rated": 25.0, "esr": 0.0},
        {"refs": "C410-C433", "count": 24, "c_nom": pytest.approx(22e-6), "c_tol": 0.0, "dielectric": "x7r",
         "v_rated": 25.0, "esr": 0.0},
    ]


def test_rows_alike_merge_and_counts_add():
    bom = parse_bom("references;capacitance;type;rated voltage;quantity;tolerance;ESR\n"
                    "C1;22u;X7R;25V;1;10%;4 mOhm\n"
                    "C7;22 µF;x7r;25;1;±10 %;4m\n"
                    "C9;22uF;X7R;16V;1;10%;4 mOhm\n")
    assert bom.errors == []
    assert len(bom.groups) == 2  # the 16 V part is its own group
    first = bom.groups[0]
    assert first["count"] == 2 and first["refs"] == "C1, C7"
    assert first["c_tol"] == pytest.approx(0.1) and first["esr"] == pytest.approx(4e-3)
    assert bom.groups[1]["v_rated"] == 16.0 and bom.groups[1]["refs"] == "C9"


def test_a_missing_count_is_the_designators_counted():
    bom = parse_bom("refdes\tvalue\tdielectric\tvoltage\n"
                    "C1, C3-C5\t4.7u\tX5R\t16V\n"
                    "C20..C23 C30\t100n\tNP0\t50V\n")
    assert bom.errors == []
    assert [g["count"] for g in bom.groups] == [4, 5]
    assert [g["dielectric"] for g in bom.groups] == ["x5r", "c0g"]


@pytest.mark.parametrize("refs, n", [("C1", 1), ("C1, C3-C5", 4), ("C1 C2;C3", 3), ("C3-5", 3), ("C10 - C12", 3),
                                     ("C3..C5", 3), ("c3\u2013C5", 3), ("", 0)])
def test_designators_count(refs, n):
    assert count_refs(refs) == n


@pytest.mark.parametrize("refs, words", [("C5-C3", "backwards"), ("C3-R5", "common prefix"), ("C1,,?", "not a designator")])
def test_designators_that_do_not_count_say_why(refs, words):
    with pytest.raises(ValueError, match=words):
        count_refs(refs)


@pytest.mark.parametrize("word, expected", [
    ("X7R", ("x7r", True)), ("x5r ceramic", ("x5r", True)), ("C0G", ("c0g", True)), ("NP0", ("c0g", True)),
    ("COG", ("c0g", True)), ("aluminium electrolytic", ("electrolytic", True)), ("Electrolytic", ("electrolytic", True)),
    ("alu", ("electrolytic", True)), ("Aluminum polymer", ("polymer", True)), ("polypropylene film", ("film", True)),
    ("Y5V", ("other", False)), ("", ("other", False)),
])
def test_dielectric_words_map_to_the_documents_ids(word, expected):
    assert dielectric_id(word) == expected


def test_an_unknown_dielectric_is_other_with_a_warning():
    bom = parse_bom("refdes,value,dielectric,rating\nC1,10u,Y5V,10V\n")
    assert bom.errors == [] and bom.groups[0]["dielectric"] == "other"
    assert any("Y5V" in w and "line 2" in w.lower() for w in bom.warnings)


def test_errors_name_the_line_and_the_column():
    bom = parse_bom("refdes,value,dielectric,rating,count\n"
                    "C1,22u,X7R,25V,2.5\n"
                    "\n"
                    "C2,22 furlongs,X7R,25V,1\n"
                    "C3,22u,X7R,,1\n"
                    "C4,22u,X7R,25V,1\n")
    assert BomProblem(2, "count", "“2.5” is not a whole number of capacitors") in bom.errors
    assert any(e.line == 4 and e.column == "value" for e in bom.errors)  # the blank line 3 still counts
    assert any(e.line == 5 and e.column == "rating" and "blank" in e.message for e in bom.errors)
    assert len(bom.errors) == 3 and not bom.ok
    assert bom.groups == [{"refs": "C4", "count": 1, "c_nom": pytest.approx(22e-6), "c_tol": 0.0,
                           "dielectric": "x7r", "v_rated": 25.0, "esr": 0.0}]
    assert str(bom.errors[0]).startswith("line 2, column count:")


def test_a_header_without_the_needed_columns_is_refused_on_line_one():
    bom = parse_bom("part,value\nC1,22u\n")
    assert bom.groups == [] and len(bom.errors) == 1
    problem = bom.errors[0]
    assert problem.line == 1 and "dielectric" in problem.message and "rating" in problem.message
    assert "count" in problem.message
    assert parse_bom("").errors[0].line == 1
    assert parse_bom("refdes,value,dielectric,rating\n").errors[0].message.startswith("no capacitor lines")


def test_a_count_that_disagrees_with_the_designators_is_taken_with_a_warning():
    bom = parse_bom("refdes,value,dielectric,rating,count\nC1-C3,1u,X7R,16V,4\n")
    assert bom.groups[0]["count"] == 4
    assert any("3 designators listed but count 4" in w for w in bom.warnings)


def test_a_designator_listed_twice_is_warned_of_and_columns_not_read_are_named():
    bom = parse_bom("refdes,value,dielectric,rating,manufacturer\nC1-C3,1u,X7R,16V,x\nC2,1u,X7R,16V,y\n")
    assert any("C2 is listed on line 2 and again on line 3" in w for w in bom.warnings)
    assert any("manufacturer" in w for w in bom.warnings)


def test_more_groups_than_a_bank_holds_is_an_error():
    lines = [f"C{k},{k + 1}u,X7R,25V,1" for k in range(MAX_BANK_GROUPS + 1)]
    bom = parse_bom("refdes,value,dielectric,rating,qty\n" + "\n".join(lines))
    assert any(f"at most {MAX_BANK_GROUPS}" in e.message for e in bom.errors)


def test_the_groups_are_a_bank_the_rail_document_takes():
    bom = parse_bom("refdes,value,dielectric,rating,qty,tol,esr\n"
                    "\"C401, C402\",330uF,electrolytic,25V,,20%,80 mOhm\n"
                    "C410-C433,22uF,X7R,25V,24,10%,4 mOhm\n")
    assert bom.ok
    doc = rail_doc("BANKED", load={"c_nom": None, "c_tol": 0, "esr": 0, "bank": bom.groups})
    normal = normalize_document(doc)
    assert normal["load"]["bank"][0]["count"] == 2 and normal["load"]["bank"][0]["refs"] == "C401, C402"
    assert "c_nom" not in normal["load"]


def test_a_tolerance_not_given_is_read_as_0_percent_and_said():
    # 0 % is the only reading a blank gives, and it narrows the corners: the person is told, per line or once
    bom = parse_bom("Refdes,Value,Dielectric,Rating,Qty,Tolerance\n"
                    "C1,22u,X7R,25V,1,10%\n"
                    "C2,47u,X5R,25V,1,\n")
    assert bom.ok and [g["c_tol"] for g in bom.groups] == [pytest.approx(0.1), 0.0]
    assert [w for w in bom.warnings if "tolerance" in w] == [
        "Line 3: no tolerance given; read as 0 % (the corners do not move this group)."]
    without = parse_bom("Refdes,Value,Dielectric,Rating,Qty\nC1,22u,X7R,25V,1\n")
    assert without.ok and any(w.startswith("No tolerance column: every group is read at 0 % tolerance")
                              for w in without.warnings)

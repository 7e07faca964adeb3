"""The read models behind the overview pages: the supply budget's sum, the result parts store."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from sqlalchemy import select, update

from server.models import AnalysisResult
from server.services import budget
from server.services.result_parts import ResultKey, clear, result_parts
from tests.pages.helpers import actor_of, seed_board


def test_currents_sum_on_the_union_of_time_points_and_the_peak_is_exact():
    # rail a: a triangle peaking at 1 ms; rail b: a step that holds its last value after 2 ms
    t, each, total = budget.sum_currents([([0, 1e-3, 2e-3], [0, 4.0, 0]), ([0, 0.5e-3, 2e-3], [0, 2.0, 2.0])])
    assert_allclose(t, [0, 0.5e-3, 1e-3, 2e-3])
    assert_allclose(each[0], [0, 2.0, 4.0, 0], rtol=1e-12)
    assert_allclose(total, [0, 4.0, 6.0, 2.0], rtol=1e-12)
    t2, _, total2 = budget.sum_currents([([0, 1e-3], [1.0, 3.0]), ([0, 4e-3], [0, 0])])
    assert_allclose(np.interp(3e-3, t2, total2), 3.0)  # rail 1 held at its last value


def test_a_board_budget_draws_the_biggest_rails_and_groups_the_rest(people, session_factory, monkeypatch):
    monkeypatch.setattr(budget, "MAX_RAIL_TRACES", 2)
    ids = seed_board(session_factory, analysed=3, unanalysed=1)
    with session_factory() as s:
        (entry,) = budget.board_budget(session=s, actor=actor_of(s, "viewer"), board_id=ids["board_id"])
    assert list(entry["currents"])[-1] == "2 other rails"
    assert len(entry["currents"]) == 2 and entry["missing"] == ["RAIL_3"]
    stacked = np.sum([np.asarray(v) for v in entry["currents"].values()], axis=0)
    assert_allclose(stacked, entry["total"], rtol=1e-9, atol=1e-9)
    assert entry["peak"] == pytest.approx(max(entry["total"]))
    assert entry["over"] is (entry["peak"] > 10.0)


def test_result_parts_are_read_once_and_kept_by_row_identity(people, session_factory):
    clear()
    ids = seed_board(session_factory, analysed=1, unanalysed=0)
    with session_factory() as s:
        row = s.scalar(select(AnalysisResult))
        key = ResultKey(row.id, row.sha256, row.created_at)
        first = result_parts(s, [key])[row.id]
        assert first.checks and first.t and len(first.t) == len(first.i)
        # behind the store's back (results never change in service): the store still answers
        s.execute(update(AnalysisResult).where(AnalysisResult.id == row.id).values(result={"checks": []}))
        s.commit()
        assert result_parts(s, [key])[row.id] is first
        other = ResultKey(row.id, row.sha256, row.created_at.replace(year=row.created_at.year - 1))
        assert result_parts(s, [other])[row.id].checks == []  # another row identity is read afresh
    clear()
    assert ids["rail_ids"]

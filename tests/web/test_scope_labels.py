"""How the job page names a scope and orders its curves (service/web/validation_curves.py)."""

from __future__ import annotations

from service.cv.scopes import FINAL_SCOPE, outer_scope
from service.web import validation_curves as curves


def test_scopes_are_named_for_people() -> None:
    assert curves.scope_label(outer_scope(0, 2)) == "outer fold 2"
    assert curves.scope_label(outer_scope(1, 12)) == "outer fold 12 (repeat 1)"
    assert curves.scope_label(FINAL_SCOPE) == "all rows (final search)"


def test_curves_run_in_repeat_then_fold_order_with_the_final_search_last() -> None:
    scopes = [FINAL_SCOPE, outer_scope(1, 0), outer_scope(0, 10), outer_scope(0, 2)]
    ordered = sorted(scopes, key=curves._scope_order)
    assert ordered == [outer_scope(0, 2), outer_scope(0, 10), outer_scope(1, 0), FINAL_SCOPE]


def test_the_heat_map_caption_names_what_its_cells_average() -> None:
    def grid(scope: str) -> curves.Heat:
        return curves.Heat("svc", "C", "gamma", ["1"], ["0.1"], {("1", "0.1"): (0.9, 4)}, scope)

    assert grid(FINAL_SCOPE).over == "all rows (final search)"
    assert grid("pooled").over == "every scope pooled"

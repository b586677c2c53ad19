"""The reference-levels page: ICRP 135's proposed local DRLs beside the levels in force, and the
recurrent-exposure list.

Package-internal; :mod:`beamaudit.dashboards.pages` re-exports :func:`render_levels`.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

from beamaudit.dashboards import _web
from beamaudit.dashboards.attention import exam_names
from beamaudit.dashboards.rounding import format_level, format_number, is_number
from beamaudit.dashboards.tables import TableLike
from beamaudit.dashboards.wording import exam_name, patient_group_words, quantity_short

__all__ = ["render_levels"]

EMPTY = "–"


def _value(value: Any, unit: str) -> str:
    return f"{format_number(value, unit)} {unit}".rstrip() if is_number(value) else EMPTY


def _words(code: Any) -> str:
    """A code (a clinical indication) in words: ``acute_stroke`` -> ``acute stroke``."""
    return str(code).replace("_", " ") if code else ""


def _quantity_label(r: Mapping[str, Any]) -> str:
    return str(r.get("quantity_label") or quantity_short(str(r.get("quantity") or "")))


def _group_label(r: Mapping[str, Any], label_key: str = "patient_group_label") -> str:
    label = r.get(label_key)
    return str(label) if label else patient_group_words(r.get("patient_group"))


def _interval(low: Any, high: Any, unit: str) -> str:
    """An interval as far as the rooms support it (a bound they cannot support is open)."""
    if not is_number(low) and not is_number(high):
        return "no interval with so few rooms"
    lo = format_number(low, unit) if is_number(low) else "open"
    hi = format_number(high, unit) if is_number(high) else "open"
    return f"{lo} to {hi}"


def _proposal_row(r: Mapping[str, Any], index: int, names: Mapping[str, str]) -> dict[str, Any]:
    unit = str(r.get("unit") or "")
    proposed = r.get("proposal_status") == "proposed"
    ratio = r.get("proposed_to_local_ratio")
    return {
        "index": index,
        "site": r.get("site") or EMPTY,
        "exam_type": r.get("exam_type"),
        "exam_name": r.get("exam_name") or exam_name(r.get("exam_type"), names),
        "indication": r.get("clinical_indication") or "",
        "indication_words": _words(r.get("clinical_indication")),
        "group": r.get("patient_group") or "",
        "group_label": _group_label(r),
        "quantity": r.get("quantity"),
        "quantity_label": _quantity_label(r),
        "unit": unit,
        "n_rooms": int(r.get("n_rooms") or 0),
        "n_rooms_short": int(r.get("n_rooms_too_few_patients") or 0),
        "n_patients": int(r.get("n_patients") or 0),
        "min_rooms": int(r.get("min_rooms") or 0),
        "typical": _value(r.get("typical_value"), unit),
        "typical_interval": _interval(r.get("typical_ci_low"), r.get("typical_ci_high"), unit),
        "proposed": proposed,
        "proposal": _value(r.get("proposed_local_drl"), unit) if proposed else "",
        "proposal_interval": _interval(r.get("proposed_ci_low"), r.get("proposed_ci_high"), unit)
        if proposed
        else "",
        "local": format_level(r.get("local_level")) if is_number(r.get("local_level")) else "",
        "local_set": r.get("local_level_set") or "",
        "national": format_level(r.get("national_level"))
        if is_number(r.get("national_level"))
        else "",
        "national_set": r.get("national_level_set") or "",
        "ratio": format_number(ratio, "1") if is_number(ratio) else "",
    }


def render_levels(
    proposals: Sequence[Mapping[str, Any]],
    levels: Sequence[Mapping[str, Any]],
    *,
    run_label: str = "",
    run_id: int | None = None,
    can_adopt: bool = False,
    adopt_path: str = "",
    local_set_names: Sequence[str] = (),
    recurrent: Mapping[str, Any] | None = None,
    exam_types: TableLike | None = None,
    context: _web.PageContext | None = None,
) -> str:
    """The reference-levels page (served at ``/levels``).

    Parameters
    ----------
    proposals : sequence of dict
        The site values of one review run (``site_values`` of its result), each optionally with
        ``exam_name``, ``quantity_label`` and ``patient_group_label`` for people.
    levels : sequence of dict
        The levels in force: ``set``, ``kind``, ``version``, ``effective_from``, ``exam_type``,
        ``quantity``, ``patient_group`` (label), ``clinical_indication``, ``value``, ``unit``,
        ``source``.
    run_label : str
        Which run the proposals come from, in words.
    run_id : int, optional
        Its id (sent when a proposal is adopted).
    can_adopt : bool
        Whether the signed-in user may adopt proposals (physicist).
    adopt_path : str
        The API path proposals are adopted through (``POST``, JSON).
    local_set_names : sequence of str
        Names of the local sets, offered for the new version.
    recurrent : dict, optional
        The recurrent-exposure list (shown to physicists only): ``patients`` (pseudonym, counts,
        sums), ``window_years``, ``level_msv``, ``as_of``, the counts and ``caution``.
    exam_types : table, optional
        The ``EXAM_TYPES`` table: the catalogue's names where a row has no ``exam_name``
        (quantities and patient groups are put in words from their names where a row has no
        label; no code reaches the page).
    context : PageContext, optional
        Facility, version, user.
    """
    names = exam_names(exam_types)
    rows = [_proposal_row(r, i, names) for i, r in enumerate(proposals)]
    n_proposed = sum(1 for r in rows if r["proposed"])
    level_rows = [
        {
            **dict(x),
            "exam_name": x.get("exam_name") or exam_name(x.get("exam_type"), names),
            "quantity_label": _quantity_label(x),
            "patient_group": _group_label(x, "patient_group"),
            "indication_words": _words(x.get("clinical_indication")),
            "value_text": format_level(x.get("value"), str(x.get("unit") or "")),
        }
        for x in levels
    ]
    sites = sorted({r["site"] for r in rows if r["proposed"]})
    every_site = {r["site"] for r in rows}
    patients = []
    if recurrent is not None:
        patients = [
            {
                **p,
                "cumulative": format_number(p.get("cumulative_dose_msv"), "mSv"),
                "peak": format_number(p.get("peak_window_dose_msv"), "mSv"),
            }
            for p in recurrent.get("patients", ())
        ]
    return _web.render_page(
        "levels.html",
        context=context,
        page_title="Reference levels",
        active="levels",
        rows=rows,
        n_proposed=n_proposed,
        levels=level_rows,
        run_label=run_label,
        run_id=run_id,
        can_adopt=can_adopt and n_proposed > 0,
        adopt_path=adopt_path,
        sites=sites,
        one_site=next(iter(every_site)) if len(every_site) == 1 else "",
        local_set_names=list(local_set_names),
        recurrent=recurrent,
        patients=patients,
    )

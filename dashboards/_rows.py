"""Rows for the templates: group and flag tables turned into plain dicts of display text.

Package-internal, shared by :mod:`beamaudit.dashboards.pages` and
:mod:`beamaudit.dashboards.report`.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import pandas as pd

from beamaudit.dashboards import _review_figures, _web
from beamaudit.dashboards.distributions import ExamTypes
from beamaudit.dashboards.rounding import format_level, format_number
from beamaudit.dashboards.wording import (
    FLAG_KIND_WORDS,
    FLAG_STATUS_WORDS,
    LEVEL_KIND_WORDS,
    SEVERITY_WORDS,
    STATUS_LOOK,
    exam_name,
    quantity_short,
    short_group_label,
    words_for,
)

__all__ = [
    "distribution_block",
    "flag_rows",
    "group_rows",
    "level_sets",
    "plain",
    "status_counts",
    "when",
]


def comparison(row: pd.Series) -> dict[str, Any]:
    """One level a group is compared with, in words: ``"National level 10 mGy"`` and, when the
    review gave one, the ratio (``"0.43×"``)."""
    if pd.isna(row["reference_level"]):
        level = ""
    else:
        kind = LEVEL_KIND_WORDS.get(row["level_kind"], "Level")
        level = f"{kind} {format_level(row['reference_level'], row['quantity'])}"
    return {
        "level": level,
        "level_set": row["level_set"] or "",
        "ratio": "" if pd.isna(row["ratio_to_level"]) else f"{row['ratio_to_level']:.2f}×",
        "status": row["status"],
        "reason": row["status_reason"] or "",
    }


def group_rows(
    table: pd.DataFrame, period: str | None, names: Mapping[str, str] | None = None
) -> list[dict[str, Any]]:
    """One row per (room, exam_type, quantity), its comparisons with each level inside.

    The row's status is its most urgent comparison's; its ratio the largest.
    Rows come most urgent first, then by ratio, room and examination.
    """
    rows = []
    table = table.assign(
        _group=[short_group_label(g) for g in table.get("patient_group_label", [None] * len(table))]
    )
    keys = ["room", "exam_type", "_group", "quantity"]
    for (room, exam, group, quantity), part in table.groupby(keys, sort=True):
        part = part.assign(_rank=part["status"].map(lambda v: STATUS_LOOK[v].rank))
        part = part.sort_values(["_rank", "ratio_to_level"], ascending=[True, False])
        first = part.iloc[0]
        ratio = part["ratio_to_level"].max()
        comparisons = [comparison(r) for _, r in part.iterrows()]
        reasons = list(dict.fromkeys(c["reason"] for c in comparisons if c["reason"]))
        rows.append(
            {
                "room": room,
                "room_href": _web.room_href(room),
                "exam_type": exam,
                "exam_name": exam_name(exam, names),
                "group_label": group,
                "exam_href": _web.distributions_href(
                    exam_type=exam, quantity=quantity, period=period
                ),
                "quantity": quantity,
                "quantity_label": quantity_short(quantity),
                "n": int(first["n"]),
                "n_standard": int(first["n_standard"]),
                "median": format_number(first["median"]),
                "median_value": _web.sort_value(first["median"]),
                "quartiles": ""
                if pd.isna(first["q1"]) and pd.isna(first["q3"])
                else f"{format_number(first['q1'])} – {format_number(first['q3'])}",
                "comparisons": comparisons,
                "ratio": "–" if pd.isna(ratio) else f"{ratio:.2f}",
                "ratio_value": _web.sort_value(ratio),
                "status": first["status"],
                "status_rank": STATUS_LOOK[first["status"]].rank,
                "reasons": reasons,
            }
        )
    rows.sort(key=lambda r: (r["status_rank"], -float(r["ratio_value"] or -1), r["room"]))
    return rows


def level_sets(table: pd.DataFrame) -> list[tuple[str, str]]:
    """The (kind in words, set name) pairs used in a groups table."""
    used = table.dropna(subset=["reference_level"]).drop_duplicates(["level_kind", "level_set"])
    return sorted(
        (LEVEL_KIND_WORDS.get(k, "Level"), s or "(no name given)")
        for k, s in zip(used["level_kind"], used["level_set"], strict=True)
    )


def status_counts(rows: list[dict[str, Any]]) -> list[tuple[str, int]]:
    """How many groups (rows of :func:`group_rows`) have each status, most urgent first."""
    counts: dict[str, int] = {}
    for row in rows:
        counts[row["status"]] = counts.get(row["status"], 0) + 1
    return sorted(counts.items(), key=lambda item: STATUS_LOOK[item[0]].rank)


def distribution_block(
    events: pd.DataFrame,
    levels: pd.DataFrame | None,
    *,
    exam_type: str,
    quantity: str,
    catalogue: ExamTypes,
    log_y: bool,
    static: bool = False,
    width_px: int | None = None,
    fig_id: str = "dist-0",
) -> _web.FigureBlock | None:
    """The figure block of one distribution, or ``None`` when it has no value to draw."""
    rows = events[events["exam_type"] == exam_type]
    if quantity not in rows.columns or not rows[quantity].notna().any():
        return None
    fig = _review_figures._distribution(
        rows,
        levels,
        quantity=quantity,
        exam_type=exam_type,
        log_y=log_y,
        exam_name=catalogue.name(exam_type),
        per_study=catalogue.study_rule(exam_type, quantity),
    )
    if width_px is not None:
        fig.update_layout(width=width_px)
    return _web.figure_block(fig, fig_id, static=static)


def _flag_link(row: pd.Series, period: str | None) -> tuple[str, str]:
    """Where a flag's subject can be seen: (words, path)."""
    if row["study_uid"]:
        return "the exam", _web.exam_href(row["study_uid"])
    if row["kind"] == "unmapped_events":
        return "the unmapped protocols", _web.unmapped_href(period or row["period"])
    return "", ""


def flag_rows(
    table: pd.DataFrame,
    names: Mapping[str, str] | None = None,
    *,
    followup: Mapping[str, str] | None = None,
    **only: str | None,
) -> list[dict[str, Any]]:
    """Display rows of a ``FLAGS`` table (filtered by the ``only`` columns' values), open first.

    ``followup`` maps a Study Instance UID to its NCRP 168 follow-up state in words; an
    ``srdl_exceeded`` row of such a study shows it."""
    for key, value in only.items():
        if value:
            table = table[table[key] == value]
    status_order = {"open": 0, "acknowledged": 1, "closed": 2}
    severity_order = {"action": 0, "warning": 1, "info": 2}
    table = table.assign(
        _order=table["status"].map(status_order),
        _severity=table["severity"].map(lambda s: severity_order.get(s, 1)),
    ).sort_values(
        ["_order", "period", "_severity", "room", "kind"],
        ascending=[True, False, True, True, True],
        na_position="last",
    )
    out = []
    for _, r in table.iterrows():
        link_words, link = _flag_link(r, None)
        run_id, flag_id = r.get("run_id"), r.get("flag_id")
        out.append(
            {
                "flag_id": flag_id or "",
                "kind": r["kind"],
                "kind_words": words_for(FLAG_KIND_WORDS, r["kind"]),
                "severity": r["severity"],
                "severity_words": words_for(SEVERITY_WORDS, r["severity"]),
                "reason": r["reason"],
                "room": r["room"] or "",
                "room_href": _web.room_href(r["room"]) if r["room"] else "",
                "exam_type": r["exam_type"] or "",
                "exam_name": exam_name(r["exam_type"], names, empty=""),
                "group_label": short_group_label(r.get("patient_group_label")),
                "period": r["period"],
                "status": r["status"],
                "status_words": FLAG_STATUS_WORDS[r["status"]],
                "study_uid": r["study_uid"] or "",
                "exam_href": _web.exam_href(r["study_uid"]) if r["study_uid"] else "",
                "link_words": link_words,
                "link": link,
                "event_id": r["event_id"] or "",
                "note": _text(r.get("note")),
                "changed": _text(r.get("changed")),
                "triage_href": _web.triage_href(run_id, flag_id) if run_id and flag_id else "",
                "followup": (followup or {}).get(r["study_uid"] or "", "")
                if r["kind"] == "srdl_exceeded"
                else "",
            }
        )
    return out


def _text(value: Any) -> str:
    return value if isinstance(value, str) else ""


def plain(value: Any) -> str:
    if value is None:
        return "–"
    if isinstance(value, bool):
        return "yes" if value else "no"
    return str(value)


def when(stamp: pd.Timestamp | None) -> str:
    return "–" if stamp is None else stamp.strftime("%Y-%m-%d %H:%M UTC")

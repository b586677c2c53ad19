"""Rows for the templates: group and flag tables turned into plain dicts of display text.

Package-internal, shared by :mod:`beamaudit.dashboards.pages` and
:mod:`beamaudit.dashboards.report`.
"""

from __future__ import annotations

from typing import Any

import pandas as pd

from beamaudit.dashboards import _review_figures, _web
from beamaudit.dashboards.figures import EVENT_QUANTITIES
from beamaudit.dashboards.wording import (
    FLAG_STATUS_WORDS,
    LEVEL_KIND_WORDS,
    STATUS_LOOK,
    quantity_short,
    quantity_unit,
)

__all__ = [
    "distribution_blocks",
    "flag_rows",
    "group_rows",
    "level_sets",
    "plain",
    "status_counts",
    "when",
]


def comparison(row: pd.Series) -> dict[str, Any]:
    """One level a group is compared with, in words."""
    if pd.isna(row["reference_level"]):
        level = "–"
    else:
        kind = {"local": "Local", "national": "National"}.get(row["level_kind"], "Level")
        level = f"{kind} {_web.fmt(row['reference_level'])} {quantity_unit(row['quantity'])}"
    return {
        "level": level,
        "level_set": row["level_set"] or "",
        "ratio": "" if pd.isna(row["ratio_to_level"]) else f"{row['ratio_to_level']:.2f}×",
        "status": row["status"],
        "reason": row["status_reason"] or "",
    }


def group_rows(table: pd.DataFrame, period: str | None) -> list[dict[str, Any]]:
    """One row per (room, exam_type, quantity), its comparisons with each level inside.

    The row's status is its most urgent comparison's; its ratio the largest.
    Rows come most urgent first, then by ratio, room and examination.
    """
    rows = []
    for (room, exam, quantity), part in table.groupby(["room", "exam_type", "quantity"], sort=True):
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
                "exam_href": _web.distributions_href(
                    exam_type=exam, quantity=quantity, period=period
                ),
                "quantity": quantity,
                "quantity_label": quantity_short(quantity),
                "n": int(first["n"]),
                "n_standard": int(first["n_standard"]),
                "median": _web.fmt(first["median"]),
                "median_value": _web.sort_value(first["median"]),
                "quartiles": f"{_web.fmt(first['q1'])} – {_web.fmt(first['q3'])}",
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
    """How many groups (rows of :func:`_group_rows`) have each status, most urgent first."""
    counts: dict[str, int] = {}
    for row in rows:
        counts[row["status"]] = counts.get(row["status"], 0) + 1
    return sorted(counts.items(), key=lambda item: STATUS_LOOK[item[0]].rank)


def distribution_blocks(
    events: pd.DataFrame,
    levels: pd.DataFrame | None,
    *,
    exam_type: str | None,
    quantity: str | None,
    log_y: bool,
    static: bool = False,
    width_px: int | None = None,
    id_prefix: str = "dist",
) -> list[tuple[str, str, _web.FigureBlock]]:
    blocks: list[tuple[str, str, _web.FigureBlock]] = []
    exam_types = sorted(events["exam_type"].unique()) if exam_type is None else [exam_type]
    for exam in exam_types:
        rows = events[events["exam_type"] == exam]
        if quantity is not None:
            quantities = [quantity]
        elif levels is not None and (levels["exam_type"] == exam).any():
            # the quantities the review covers for this examination
            covered = set(levels.loc[levels["exam_type"] == exam, "quantity"])
            quantities = [q for q in EVENT_QUANTITIES if q in covered]
        else:
            quantities = list(EVENT_QUANTITIES)
        for q in quantities:
            if q not in rows.columns or not rows[q].notna().any():
                continue
            fig = _review_figures._distribution(
                rows, levels, quantity=q, exam_type=exam, log_y=log_y
            )
            if width_px is not None:
                fig.update_layout(width=width_px)
            fig_id = f"{id_prefix}-{len(blocks)}"
            blocks.append((exam, q, _web.figure_block(fig, fig_id, static=static)))
    return blocks


def flag_rows(table: pd.DataFrame, **only: str | None) -> list[dict[str, Any]]:
    for key, value in only.items():
        if value:
            table = table[table[key] == value]
    status_order = {"open": 0, "acknowledged": 1, "closed": 2}
    table = table.assign(_order=table["status"].map(status_order)).sort_values(
        ["_order", "period", "room", "kind"],
        ascending=[True, False, True, True],
        na_position="last",
    )
    return [
        {
            "kind": r["kind"],
            "severity": r["severity"],
            "reason": r["reason"],
            "room": r["room"] or "",
            "room_href": _web.room_href(r["room"]) if r["room"] else "",
            "exam_type": r["exam_type"] or "",
            "period": r["period"],
            "status": r["status"],
            "status_words": FLAG_STATUS_WORDS[r["status"]],
            "study_uid": r["study_uid"] or "",
            "exam_href": _web.exam_href(r["study_uid"]) if r["study_uid"] else "",
            "event_id": r["event_id"] or "",
            "note": (r["note"] if "note" in r and isinstance(r["note"], str) else "") or "",
            "changed": (r["changed"] if "changed" in r and isinstance(r["changed"], str) else "")
            or "",
        }
        for _, r in table.iterrows()
    ]


def plain(value: Any) -> str:
    if value is None:
        return "–"
    if isinstance(value, bool):
        return "yes" if value else "no"
    return str(value)


def when(stamp: pd.Timestamp | None) -> str:
    return "–" if stamp is None else stamp.strftime("%Y-%m-%d %H:%M UTC")

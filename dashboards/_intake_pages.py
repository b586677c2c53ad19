"""Pages about what came in and could not be used: rejected files, unmapped header values.

Package-internal; :mod:`beamaudit.dashboards.pages` re-exports the render functions.
"""

from __future__ import annotations

from collections.abc import Sequence

import pandas as pd

from beamaudit.dashboards import _web
from beamaudit.dashboards.tables import INGEST_ERRORS, UNMAPPED, UNMAPPED_FIELDS, TableLike
from beamaudit.dashboards.wording import words_for

__all__ = ["render_ingest_errors", "render_unmapped"]

#: how the ingest paths are named in ``received_via``, in words
_VIA_WORDS = {
    "scan": "folder scan",
    "cstore": "C-STORE",
    "c-store": "C-STORE",
    "listen": "C-STORE",
    "pull": "DICOMweb pull",
    "dicomweb": "DICOMweb pull",
    "upload": "upload",
}

#: the header values' column headings, with the DICOM attribute each comes from
UNMAPPED_HEADINGS: dict[str, tuple[str, str]] = {
    "modality": ("Modality", "(0008,0060)"),
    "room": ("Room", "from the device"),
    "body_part": ("Body part", "(0018,0015)"),
    "view_position": ("View", "(0018,5101)"),
    "study_description": ("Study description", "(0008,1030)"),
    "series_description": ("Series description", "(0008,103E)"),
    "protocol_name": ("Protocol name", "(0018,1030)"),
}


def _when(stamp: pd.Timestamp | None) -> str:
    return "–" if stamp is None or pd.isna(stamp) else stamp.strftime("%Y-%m-%d %H:%M UTC")


def render_ingest_errors(
    errors: TableLike,
    *,
    note: str | None = None,
    context: _web.PageContext | None = None,
) -> str:
    """The files and objects refused at ingest (served at ``/ingest-errors``), newest first.

    Parameters
    ----------
    errors : table
        An ``INGEST_ERRORS`` table.
    note : str, optional
        What the list covers, in words (e.g. "since the review of 2026-11").
    context : PageContext, optional
        Facility, version, user.
    """
    table = INGEST_ERRORS.validate(errors).sort_values(
        "occurred_at", ascending=False, kind="mergesort"
    )
    counts = table["code"].value_counts()
    rows = [
        {
            "when": _when(r["occurred_at"]),
            "via": _VIA_WORDS.get(str(r["received_via"]).lower(), r["received_via"]),
            "source": r["source"],
            "uid": r["sop_instance_uid"] or "",
            "code": words_for({}, str(r["code"])),
            "reason": r["reason"],
        }
        for _, r in table.iterrows()
    ]
    return _web.render_page(
        "ingest_errors.html",
        context=context,
        page_title="Rejected files",
        active="ingest_errors",
        rows=rows,
        note=note or "",
        counts=[(words_for({}, str(c)), int(n)) for c, n in counts.items()],
    )


def render_unmapped(
    unmapped: TableLike,
    *,
    period: str | None = None,
    periods: Sequence[str] = (),
    context: _web.PageContext | None = None,
) -> str:
    """The header values that map to no examination type (served at ``/unmapped``).

    Parameters
    ----------
    unmapped : table
        An ``UNMAPPED`` table (the review's unmapped summary of ``period``).
    period : str, optional
        The review period, ``YYYY-MM``.
    periods : sequence of str
        Periods offered by the picker.
    context : PageContext, optional
        Facility, version, user.
    """
    if period is not None:
        _web.check_period(period)
    table = UNMAPPED.validate(unmapped).sort_values("n_events", ascending=False, kind="mergesort")
    shown = [f for f in UNMAPPED_FIELDS if table[f].notna().any()] or list(UNMAPPED_FIELDS)
    rows = [
        {
            "values": [r[f] for f in shown],
            "n_events": int(r["n_events"]),
            "n_studies": "–" if pd.isna(r["n_studies"]) else int(r["n_studies"]),
            "first": _when(r["first_seen"]),
            "last": _when(r["last_seen"]),
        }
        for _, r in table.iterrows()
    ]
    return _web.render_page(
        "unmapped.html",
        context=context,
        page_title="Unmapped protocols" + (f" of {period}" if period else ""),
        active="unmapped",
        period=period or "",
        periods=_web.period_choices(period, periods) if period else [],
        headings=[UNMAPPED_HEADINGS[f] for f in shown],
        rows=rows,
        n_events=int(table["n_events"].sum()) if len(table) else 0,
    )

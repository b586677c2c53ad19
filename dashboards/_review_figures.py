"""The distribution of one examination's dose per room, against its reference levels."""

from __future__ import annotations

from typing import Any

import pandas as pd
import plotly.graph_objects as go

from beamaudit.dashboards._figstyle import INK, legend_below_when_long, no_data, series, style
from beamaudit.dashboards.distributions import study_values
from beamaudit.dashboards.errors import TableError
from beamaudit.dashboards.tables import EVENTS, LEVELS, TableLike
from beamaudit.dashboards.wording import (
    LEVEL_KIND_WORDS,
    quantity_short,
    quantity_unit,
    short_group_label,
)

__all__ = ["EVENT_QUANTITIES", "LEVEL_DASH", "build_distribution"]

#: Dose columns of the events table that a distribution can show.
EVENT_QUANTITIES: tuple[str, ...] = (
    "dap_gy_cm2",
    "recon_dap_gy_cm2",
    "esak_mgy",
    "ctdivol_mgy",
    "dlp_mgy_cm",
    "reference_point_air_kerma_mgy",
    "mgd_mgy",
)


# ----------------------------------------------------------- distributions


def _check_quantity(quantity: str) -> None:
    if quantity not in EVENT_QUANTITIES:
        raise TableError(
            f"quantity '{quantity}' is not a dose column of the events table; "
            f"choose one of {', '.join(EVENT_QUANTITIES)}"
        )


def build_distribution(
    events: TableLike,
    *,
    quantity: str,
    exam_type: str,
    levels: TableLike | None = None,
    log_y: bool = False,
    title: str | None = None,
    exam_name: str | None = None,
    per_study: str | None = None,
) -> go.Figure:
    """Box plots per room of one examination's dose quantity, with its reference levels.

    Standard-size patients and other patients are separate boxes side by side (filled circles
    and open diamonds, in two colours; the legend shows the same symbols), every value drawn as
    a point. Each reference level is a horizontal line, solid for a national level, dashed for
    a local one and dotted for international guidance, named in the legend with its value.

    Parameters
    ----------
    events : table
        The ``EVENTS`` table.
    quantity : str
        One of :data:`EVENT_QUANTITIES`.
    exam_type : str
        The examination type to show (its code).
    levels : table, optional
        A ``LEVELS`` table (the ``GROUPS`` table will do); rows of other examinations or
        quantities are ignored.
    log_y : bool
        Use a logarithmic dose axis.
    title : str, optional
        Figure title; defaults to the examination and quantity.
    exam_name : str, optional
        The examination's name, for the default title (default: its code).
    per_study : {"sum", "max", "mean"}, optional
        The level applies per examination: draw one value per study, its events aggregated by
        this rule (see :func:`beamaudit.dashboards.distributions.study_values`); by default one
        value per event.

    Returns
    -------
    plotly.graph_objects.Figure
        One box trace per patient group present (not in the legend), one legend entry per
        patient group (the points' symbol), then one legend entry per level; the level lines
        are in ``layout.shapes``.

    Raises
    ------
    TableError
        A table breaks its contract, or ``quantity`` is not a dose column.
    """
    _check_quantity(quantity)
    return _distribution(
        EVENTS.validate(events),
        None if levels is None else LEVELS.validate(levels),
        quantity=quantity,
        exam_type=exam_type,
        log_y=log_y,
        title=title,
        exam_name=exam_name,
        per_study=per_study,
    )


#: line style of a reference level, by its kind
LEVEL_DASH: dict[str | None, str] = {"local": "dash", "national": "solid", "international": "dot"}
_PATIENTS = (
    (True, "Standard-size patients", "circle"),
    (False, "Other patients", "diamond-open"),
)


def _distribution(
    table: pd.DataFrame,
    levels: pd.DataFrame | None,
    *,
    quantity: str,
    exam_type: str,
    log_y: bool = False,
    title: str | None = None,
    exam_name: str | None = None,
    per_study: str | None = None,
) -> go.Figure:
    """:func:`build_distribution` on tables already validated (``EVENTS``, ``LEVELS``)."""
    rows = table[(table["exam_type"] == exam_type) & table[quantity].notna()]
    if per_study is not None:
        rows = study_values(rows, quantity, per_study)
    name = exam_name or exam_type
    short = quantity_short(quantity, with_unit=False)
    unit = quantity_unit(quantity)
    per = f"{short} per examination" if per_study else short
    default = f"{name}: {per}" + (f" ({_RULE_WORDS[per_study]})" if per_study else "")
    fig = go.Figure()
    style(
        fig,
        title=title if title is not None else default,
        x_title="Room (number of examinations)" if per_study else "Room (number of exposures)",
        y_title=f"{per} ({unit})" if unit else per,
    )
    if rows.empty:
        return no_data(fig, f"No {short} values")
    rooms = sorted(rows["room"].unique())
    counts = rows.groupby("room").size()
    for i, (flag, label, symbol) in enumerate(_PATIENTS):
        part = rows[rows["standard_patient"] == flag]
        if part.empty:
            continue
        colour = series(i)[0]
        fig.add_trace(
            go.Box(
                x=list(part["room"]),
                y=list(part[quantity]),
                name=label,
                legendgroup=label,
                showlegend=False,
                boxpoints="all",
                jitter=0.35,
                pointpos=0.0,
                marker={"symbol": symbol, "color": colour, "size": 6, "opacity": 0.75},
                line={"color": colour},
                fillcolor="rgba(0,0,0,0)",
                customdata=list(part["study_uid"]),
                hovertemplate=(
                    "%{x}<br>%{y:.3g} " + unit + "<br>%{customdata}<extra>" + label + "</extra>"
                ),
            )
        )
        fig.add_trace(_legend_entry(label, marker={"symbol": symbol, "color": colour, "size": 9}))
    fig.update_layout(boxmode="group")
    fig.update_xaxes(
        categoryorder="array",
        categoryarray=rooms,
        tickvals=rooms,
        ticktext=[f"{r} ({int(counts[r])})" for r in rooms],
    )
    if log_y:
        fig.update_yaxes(type="log")
    if levels is not None:
        _draw_levels(fig, levels, exam_type=exam_type, quantity=quantity)
    legend_below_when_long(fig)
    return fig


_RULE_WORDS = {
    "sum": "the sum over each study's exposures",
    "max": "the largest of each study's exposures",
    "mean": "the mean of each study's exposures",
}


def _legend_entry(name: str, **style_: Any) -> go.Scatter:
    """A legend entry with no data: how a series or a line looks, named."""
    mode = "lines" if "line" in style_ else "markers"
    return go.Scatter(x=[None], y=[None], mode=mode, name=name, hoverinfo="skip", **style_)


def _draw_levels(fig: go.Figure, table: pd.DataFrame, *, exam_type: str, quantity: str) -> None:
    mine = table[
        (table["exam_type"] == exam_type)
        & (table["quantity"] == quantity)
        & table["reference_level"].notna()
    ]
    if "patient_group_label" not in mine.columns:
        mine = mine.assign(patient_group_label=None)
    mine = mine.drop_duplicates(
        ["reference_level", "level_kind", "level_set", "patient_group_label"]
    )
    unit = quantity_unit(quantity)
    for _, row in mine.sort_values("reference_level").iterrows():
        kind = LEVEL_KIND_WORDS.get(row["level_kind"], "Reference level")
        dash = LEVEL_DASH.get(row["level_kind"], "solid")
        line = {"color": INK, "width": 1.6, "dash": dash}
        fig.add_hline(
            y=float(row["reference_level"]), line=line, name=str(row["level_set"] or kind)
        )
        words = f"{kind} {row['reference_level']:.3g} {unit}"
        who = short_group_label(row["patient_group_label"])
        if who:
            words += f", {who}"
        if row["level_set"]:
            words += f" ({row['level_set']})"
        fig.add_trace(_legend_entry(words, line=line))

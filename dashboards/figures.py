"""Plotly figures, each a pure function of a plain table.

Every builder has the shape ``build_x(table, *, options) -> go.Figure``: it
validates its table against the contract in :mod:`beamaudit.dashboards.tables`,
reads nothing else and changes nothing. Every axis is titled with its unit;
colour always comes with a symbol, a line style or text, and the colours are
Okabe-Ito (see :mod:`beamaudit.dashboards.wording`).

=============================  ============================================
builder                        table
=============================  ============================================
:func:`build_overview_heatmap`  ``GROUPS`` of one period
:func:`build_distribution`      ``EVENTS`` (and ``LEVELS``)
:func:`build_room_history`      ``ROOM_HISTORY`` of one room
:func:`build_dap_ratio_history` ``ROOM_HISTORY`` of one room
:func:`build_ratio_history`     ``ROOM_HISTORY`` of one room (DAP or AGD ratio)
:func:`build_spectrum`          one exposure's spectrum mapping
:func:`build_spectra`           the distinct beams of one study
:func:`build_skin_dose_map`     one procedure's skin-dose map record
=============================  ============================================
"""

from beamaudit.dashboards._heatmap_figure import build_overview_heatmap
from beamaudit.dashboards._history_figures import (
    LOG_AXIS_SPAN,
    build_dap_ratio_history,
    build_ratio_history,
    build_room_history,
)
from beamaudit.dashboards._review_figures import EVENT_QUANTITIES, build_distribution
from beamaudit.dashboards._skin_figure import build_skin_dose_map
from beamaudit.dashboards._spectrum_figure import build_spectra, build_spectrum

__all__ = [
    "EVENT_QUANTITIES",
    "LOG_AXIS_SPAN",
    "build_dap_ratio_history",
    "build_distribution",
    "build_overview_heatmap",
    "build_ratio_history",
    "build_room_history",
    "build_skin_dose_map",
    "build_spectra",
    "build_spectrum",
]

"""The plain tables the dashboards take, and their validation.

Every figure and page in :mod:`beamaudit.dashboards` takes its data as a plain
table: a :class:`pandas.DataFrame`, or an iterable of mappings (one per row).
Each table has a contract here, a :class:`TableSpec`, naming each column, its
kind, its unit and what it means. :meth:`TableSpec.validate` checks a table
against it and returns a clean DataFrame, or raises
:class:`~beamaudit.dashboards.errors.TableError` naming the column and row at
fault. Extra columns are dropped; optional columns that are absent are added
as empty.

The contracts
-------------
``GROUPS``
    One row per (room, exam_type, quantity, reference level) of a review
    period, as the review core produces it. A group compared with two levels
    (local and national) has two rows.

    ========================= ======== ===========================================
    column                    unit     meaning
    ========================= ======== ===========================================
    room                      –        room (x-ray unit) name
    exam_type                 –        examination type, as the review names it
    quantity                  –        DRL quantity, a field name with its unit
                                       suffix (``dap_gy_cm2``, ``esak_mgy``,
                                       ``ctdivol_mgy``, ``dlp_mgy_cm``...)
    n                         1        examinations in the group
    n_standard                1        of which standard-size patients
    median, q1, q3, mean      quantity median, quartiles and mean of the quantity
    ci_low, ci_high           quantity confidence interval of the median (optional)
    reference_level           quantity the level compared with (empty if none)
    level_kind                –        ``local``, ``national`` or ``international``
                                       (guidance such as IAEA BSS 115; empty if none)
    level_set                 –        name of the published or local level set
    ratio_to_level            1        median / reference_level (empty if none)
    status                    –        ``above_level``, ``possibly_above``,
                                       ``below_level``, ``insufficient_sample``,
                                       ``no_level``
    status_reason             –        the review's reason, in words (optional)
    ========================= ======== ===========================================

``FLAGS``
    One row per flag raised by the review: ``kind``, ``severity``, ``reason``,
    ``room``, ``exam_type``, ``event_id``, ``study_uid``, ``period``
    (``YYYY-MM``), ``status`` (``open``, ``acknowledged``, ``closed``), and
    optionally ``flag_id``, ``raised_at`` (UTC), ``note`` (why it was acknowledged or closed,
    and by whom), ``changed`` (what changed since the finding's previous review),
    ``run_id`` (the review run that raised it: with ``flag_id`` it makes the triage
    address ``PATCH /api/v1/reviews/{run_id}/flags/{flag_id}``), ``quantity`` (the
    quantity it concerns, a field name with its unit suffix) and ``numbers`` (the
    figures its reason quotes, a mapping as the review core stores them; the
    overview's attention lines are written from them, see
    :func:`beamaudit.dashboards.attention.attention_from_flags`).

``EVENTS``
    One row per irradiation event: ``event_id``, ``study_uid``,
    ``event_datetime`` (UTC), ``room``, ``exam_type``, ``patient_weight_kg``,
    ``standard_patient`` (bool), ``kvp_kv``, ``exposure_mas``, ``dap_gy_cm2``
    (reported), ``recon_dap_gy_cm2`` (reconstructed), ``esak_mgy``,
    ``ctdivol_mgy``, ``dlp_mgy_cm``, ``reference_point_air_kerma_mgy`` and optionally
    ``mgd_mgy`` (mean glandular dose); the dose columns may be empty where a
    modality does not give them.

``ROOM_HISTORY``
    One row per (month, exam_type, quantity) of one room: ``month``
    (``YYYY-MM``), ``exam_type``, ``quantity``, ``median`` (in the quantity's
    unit), ``n``, ``change_point`` (bool: a change detected at this month),
    ``dap_ratio_median`` (median of reported / reconstructed DAP, 1),
    ``tolerance_low`` and ``tolerance_high`` (1, the accepted band for that
    ratio), and optionally, for a mammography room, ``mgd_ratio_median``
    (median of the unit's AGD / reconstructed D_G, 1) with ``mgd_band_low``
    and ``mgd_band_high`` (1, the room's usual ratio ± the tolerance). Each
    ratio and its band may be repeated on every row of a month or given on some
    rows only.

``LEVELS``
    Reference levels to draw on distributions: ``exam_type``, ``quantity``,
    ``reference_level`` (quantity's unit), ``level_kind``, ``level_set``, and
    optionally ``status`` and ``ratio_to_level`` (the distributions page then opens
    on the most urgent group's chart). The ``GROUPS`` table satisfies it.

``EXAM_TYPES``
    The catalogue, as far as people read it: ``exam_type`` (the code the other
    tables carry), ``name`` (what every page shows instead of the code), and
    optionally ``level_applies_per`` (``projection``: one value per exposure;
    ``examination``: one value per study, its events aggregated) and
    ``aggregation`` (``quantity=rule`` pairs, rule ``sum``, ``max`` or ``mean``;
    pass the rule the review used for every quantity, see
    :func:`beamaudit.dashboards.distributions.study_values` for the default).

``ATTENTION``
    The overview's "what needs attention" lines, one per open finding (or group
    of findings of one kind and place): ``kind`` (a flag kind, or
    ``rejected_files``), ``severity`` (``action``, ``warning``, ``info``),
    ``headline`` (one line with its numbers), ``href`` (where to look),
    ``size`` (how far from expected: a factor >= 1, or a count for findings
    counted in exams or files), ``count`` (how many flags, exams or files the
    line stands for), and optionally ``tier`` (its kind's rank, 0 first;
    default :data:`beamaudit.dashboards.attention.KIND_TIERS`), ``room``,
    ``exam_type`` and ``detail`` (a second line). Build it from the ``FLAGS``
    table with :func:`beamaudit.dashboards.attention.attention_from_flags`;
    :func:`beamaudit.dashboards.attention.rank_attention` orders it.

``INGEST_ERRORS``
    Objects refused at ingest, one row each: ``occurred_at`` (UTC),
    ``received_via``, ``source`` (path, ``AE@host`` or URL),
    ``sop_instance_uid`` (if read), ``code`` and ``reason``.

``UNMAPPED``
    The header values of events that map to no examination type, one row per
    distinct combination: ``modality``, ``room``, ``body_part``,
    ``view_position``, ``study_description``, ``series_description``,
    ``protocol_name`` (each may be empty), ``n_events``, and optionally
    ``n_studies``, ``first_seen`` and ``last_seen`` (UTC), as the review's
    unmapped summary lists them.

The drill-down of one examination is a nested record rather than a table; see
:mod:`beamaudit.dashboards.records`.
"""

from __future__ import annotations

import re
from typing import Any

from beamaudit.dashboards._tablespec import Column, Rule, TableLike, TableSpec, as_frame
from beamaudit.dashboards.wording import LEVEL_KIND_WORDS, quantity_unit

__all__ = [
    "ATTENTION",
    "EVENTS",
    "EXAM_TYPES",
    "FLAGS",
    "GROUPS",
    "INGEST_ERRORS",
    "LEVELS",
    "PERIOD_PATTERN",
    "ROOM_HISTORY",
    "UNMAPPED",
    "UNMAPPED_FIELDS",
    "Column",
    "Rule",
    "TableLike",
    "TableSpec",
    "as_frame",
]

_STATUSES = ("above_level", "possibly_above", "below_level", "insufficient_sample", "no_level")
#: A review period: a calendar month written ``YYYY-MM``.
PERIOD_PATTERN = re.compile(r"^\d{4}-(0[1-9]|1[0-2])$")

_OPTIONAL: dict[str, Any] = {"required": False, "nullable": True, "minimum": 0}
_TEXT: dict[str, Any] = {"required": False, "nullable": True}
_QUANTITY = "DRL quantity: a field name with its unit suffix, e.g. 'dap_gy_cm2'"

_LEVEL_KIND = Column(
    "level_kind",
    "str",
    "",
    "kind of reference level",
    nullable=True,
    choices=tuple(LEVEL_KIND_WORDS),
)

_QUANTITY_HAS_UNIT = Rule(
    "'quantity' must be a field name ending in its unit, e.g. 'dap_gy_cm2', 'esak_mgy'",
    lambda t: t["quantity"].map(lambda q: quantity_unit(str(q)) == ""),
)

GROUPS = TableSpec(
    "groups",
    (
        Column("room", "str", "", "room (x-ray unit) name"),
        Column("exam_type", "str", "", "examination type"),
        Column("quantity", "str", "", _QUANTITY),
        Column("n", "int", "1", "examinations in the group", minimum=0),
        Column("n_standard", "int", "1", "standard-size patients in the group", minimum=0),
        Column("median", "float", "quantity", "median of the quantity", nullable=True, minimum=0),
        Column("q1", "float", "quantity", "first quartile", nullable=True, minimum=0),
        Column("q3", "float", "quantity", "third quartile", nullable=True, minimum=0),
        Column("mean", "float", "quantity", "mean of the quantity", nullable=True, minimum=0),
        Column("ci_low", "float", "quantity", "median's lower confidence limit", **_OPTIONAL),
        Column("ci_high", "float", "quantity", "median's upper confidence limit", **_OPTIONAL),
        Column(
            "reference_level", "float", "quantity", "level compared with", nullable=True, minimum=0
        ),
        _LEVEL_KIND,
        Column("level_set", "str", "", "name of the level set", nullable=True),
        Column("ratio_to_level", "float", "1", "median / level", nullable=True, minimum=0),
        Column("status", "str", "", "review status", choices=_STATUSES),
        Column("status_reason", "str", "", "the review's reason", required=False, nullable=True),
        Column(
            "patient_group_label",
            "str",
            "",
            "the group's patients in words (none: adults)",
            **_TEXT,
        ),
    ),
    rules=(
        _QUANTITY_HAS_UNIT,
        Rule("n_standard must not exceed n", lambda t: t["n_standard"] > t["n"]),
        Rule("q1 <= median <= q3", lambda t: (t["q1"] > t["median"]) | (t["median"] > t["q3"])),
    ),
)

FLAGS = TableSpec(
    "flags",
    (
        Column("flag_id", "str", "", "flag identifier", required=False, nullable=True),
        Column("kind", "str", "", "what kind of finding"),
        Column("severity", "str", "", "how serious the finding is"),
        Column("reason", "str", "", "why the flag was raised"),
        Column("room", "str", "", "room name", nullable=True),
        Column("exam_type", "str", "", "examination type", nullable=True),
        Column("event_id", "str", "", "irradiation event", nullable=True),
        Column("study_uid", "str", "", "Study Instance UID", nullable=True),
        Column("period", "str", "", "review period, YYYY-MM"),
        Column("status", "str", "", "flag status", choices=("open", "acknowledged", "closed")),
        Column("raised_at", "datetime", "", "when raised (UTC)", required=False, nullable=True),
        Column(
            "note",
            "str",
            "",
            "why the finding was acknowledged or closed, and by whom",
            required=False,
            nullable=True,
        ),
        Column(
            "changed",
            "str",
            "",
            "what changed since the finding's previous review",
            required=False,
            nullable=True,
        ),
        Column("run_id", "str", "", "the review run that raised the flag", **_TEXT),
        Column("quantity", "str", "", "the quantity it concerns (unit suffix)", **_TEXT),
        Column("numbers", "mapping", "", "the figures its reason quotes, by name", **_TEXT),
        Column("patient_group", "str", "", "the group's patient group code, if any", **_TEXT),
        Column("patient_group_label", "str", "", "the patient group in words, if any", **_TEXT),
    ),
    rules=(
        Rule(
            "'period' must be a month written YYYY-MM",
            lambda t: ~t["period"].map(lambda p: bool(PERIOD_PATTERN.match(str(p)))).astype(bool),
        ),
    ),
)


def _dose(name: str, description: str) -> Column:
    return Column(name, "float", name, description, nullable=True, minimum=0)


EVENTS = TableSpec(
    "events",
    (
        Column("event_id", "str", "", "irradiation event identifier"),
        Column("study_uid", "str", "", "Study Instance UID"),
        Column("event_datetime", "datetime", "", "when the irradiation happened (UTC)"),
        Column("room", "str", "", "room name"),
        Column("exam_type", "str", "", "examination type"),
        Column("patient_weight_kg", "float", "kg", "patient weight", nullable=True, minimum=0),
        Column("standard_patient", "bool", "", "a standard-size patient (true/false)"),
        _dose("kvp_kv", "tube voltage"),
        _dose("exposure_mas", "tube current-exposure time product"),
        _dose("dap_gy_cm2", "reported air kerma-area product"),
        _dose("recon_dap_gy_cm2", "reconstructed air kerma-area product"),
        _dose("esak_mgy", "entrance surface air kerma"),
        _dose("ctdivol_mgy", "volume CT air kerma index"),
        _dose("dlp_mgy_cm", "CT air kerma-length product"),
        _dose("reference_point_air_kerma_mgy", "air kerma at the reference point"),
        Column(
            "mgd_mgy",
            "float",
            "mgd_mgy",
            "mean glandular dose",
            required=False,
            nullable=True,
            minimum=0,
        ),
    ),
)

ROOM_HISTORY = TableSpec(
    "room history",
    (
        Column("month", "month", "", "calendar month, YYYY-MM"),
        Column(
            "exam_type",
            "str",
            "",
            "examination type (empty on a row that only carries the "
            "room's ratios of a month without medians)",
            nullable=True,
        ),
        Column("quantity", "str", "", _QUANTITY),
        Column("median", "float", "quantity", "monthly median", nullable=True, minimum=0),
        Column("n", "int", "1", "examinations in the month", minimum=0),
        Column("change_point", "bool", "", "a change detected at this month"),
        Column(
            "dap_ratio_median",
            "float",
            "1",
            "median of reported / reconstructed DAP",
            nullable=True,
            minimum=0,
        ),
        Column("tolerance_low", "float", "1", "lower edge of the accepted ratio", nullable=True),
        Column("tolerance_high", "float", "1", "upper edge of the accepted ratio", nullable=True),
        Column(
            "mgd_ratio_median",
            "float",
            "1",
            "median of the unit's AGD / reconstructed D_G",
            **_OPTIONAL,
        ),
        Column(
            "mgd_band_low", "float", "1", "lower edge of the room's usual AGD ratio", **_OPTIONAL
        ),
        Column(
            "mgd_band_high", "float", "1", "upper edge of the room's usual AGD ratio", **_OPTIONAL
        ),
    ),
    rules=(
        _QUANTITY_HAS_UNIT,
        Rule(
            "tolerance_low must not exceed tolerance_high",
            lambda t: t["tolerance_low"] > t["tolerance_high"],
        ),
        Rule(
            "mgd_band_low must not exceed mgd_band_high",
            lambda t: t["mgd_band_low"] > t["mgd_band_high"],
        ),
    ),
)

LEVELS = TableSpec(
    "levels",
    (
        Column("exam_type", "str", "", "examination type"),
        Column("quantity", "str", "", _QUANTITY),
        Column("reference_level", "float", "quantity", "reference level", nullable=True, minimum=0),
        _LEVEL_KIND,
        Column("level_set", "str", "", "name of the level set", nullable=True),
        Column("status", "str", "", "review status", required=False, nullable=True,
               choices=_STATUSES),
        Column("ratio_to_level", "float", "1", "median / level", **_OPTIONAL),
        Column("patient_group_label", "str", "", "the level's patients in words (none: adults)",
               **_TEXT),
    ),
    rules=(_QUANTITY_HAS_UNIT,),
)  # fmt: skip


_AGGREGATION = re.compile(r"^(?:[a-z][a-z0-9_]*=(?:sum|max|mean)(?:\s+|$))*$")

EXAM_TYPES = TableSpec(
    "exam types",
    (
        Column("exam_type", "str", "", "examination type code, as the review names it"),
        Column("name", "str", "", "the catalogue's name for it, shown to people"),
        Column(
            "level_applies_per",
            "str",
            "",
            "what one value is: one exposure (projection) or one study (examination)",
            required=False,
            nullable=True,
            choices=("projection", "examination"),
        ),
        Column(
            "aggregation",
            "str",
            "",
            "examination types: how a study's events make one value, 'quantity=rule' pairs "
            "(rule sum, max or mean) separated by spaces",
            **_TEXT,
        ),
    ),
    rules=(
        Rule(
            "'aggregation' must be 'quantity=rule' pairs, rule sum, max or mean",
            lambda t: t["aggregation"].map(
                lambda a: a is not None and not _AGGREGATION.match(str(a).strip())
            ),
        ),
    ),
)

_SEVERITIES = ("action", "warning", "info")

ATTENTION = TableSpec(
    "attention",
    (
        Column("kind", "str", "", "what kind of finding (a flag kind, or 'rejected_files')"),
        Column("severity", "str", "", "how serious: action, warning or info", choices=_SEVERITIES),
        Column("headline", "str", "", "one line saying what was found, with its numbers"),
        Column("href", "str", "", "where to look at it or act on it (a path of the service)"),
        Column(
            "size",
            "float",
            "1",
            "how far from what is expected, for ranking within a severity and tier: the factor "
            "(1.36 for 36 % high, a factor below 1 counted as its inverse) or, for findings "
            "counted in exams or files, the count",
            minimum=0,
        ),
        Column("count", "int", "1", "how many flags, exams or files the line stands for",
               minimum=1),
        Column("tier", "int", "1", "rank of its kind (0 first); by default the kind's",
               required=False, nullable=True, minimum=0),
        Column("room", "str", "", "room name", **_TEXT),
        Column("exam_type", "str", "", "examination type code", **_TEXT),
        Column("detail", "str", "", "a second line: the review's reason in full", **_TEXT),
        Column(
            "patient_group_label", "str", "", "the patient group in words, if any", **_TEXT
        ),
    ),
)  # fmt: skip

INGEST_ERRORS = TableSpec(
    "ingest errors",
    (
        Column("occurred_at", "datetime", "", "when the object was refused (UTC)"),
        Column("received_via", "str", "", "how it came: scan, C-STORE, DICOMweb pull, upload"),
        Column("source", "str", "", "where it came from: a path, 'AE@host' or a URL"),
        Column("sop_instance_uid", "str", "", "its SOP Instance UID, if it could be read",
               **_TEXT),
        Column("code", "str", "", "the kind of fault, a short code"),
        Column("reason", "str", "", "what was wrong, in words"),
    ),
)  # fmt: skip

UNMAPPED = TableSpec(
    "unmapped",
    (
        *(
            Column(name, "str", "", f"the header's {words}", **_TEXT)
            for name, words in (
                ("modality", "Modality (0008,0060)"),
                ("room", "room (from the device)"),
                ("body_part", "Body Part Examined (0018,0015)"),
                ("view_position", "View Position (0018,5101)"),
                ("study_description", "Study Description (0008,1030)"),
                ("series_description", "Series Description (0008,103E)"),
                ("protocol_name", "Protocol Name (0018,1030)"),
            )
        ),
        Column("n_events", "int", "1", "events with these values", minimum=1),
        Column("n_studies", "int", "1", "studies with these values", required=False,
               nullable=True, minimum=0),
        Column("first_seen", "datetime", "", "first event (UTC)", required=False, nullable=True),
        Column("last_seen", "datetime", "", "last event (UTC)", required=False, nullable=True),
    ),
)  # fmt: skip

#: the header columns of ``UNMAPPED``, in the order the page shows them
UNMAPPED_FIELDS: tuple[str, ...] = UNMAPPED.names[:7]

"""``beamaudit review``, ``levels``, ``examtypes``, ``nightly``: audits against reference levels."""

from __future__ import annotations

import json
import sys
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Annotated, Any

import typer

from beamaudit.api.cli._common import EXIT_PARTIAL, console, err_console, fail

__all__ = ["register"]

levels_app = typer.Typer(help="Reference-level sets (local and national).", no_args_is_help=True)
examtypes_app = typer.Typer(help="The exam-type catalogue and mapping rules.", no_args_is_help=True)


def _previous_month() -> str:
    first = datetime.now(UTC).date().replace(day=1)
    last = first - timedelta(days=1)
    return f"{last.year:04d}-{last.month:02d}"


def review_command(
    ctx: typer.Context,
    month: Annotated[
        str | None, typer.Option(help="Calendar month YYYY-MM (default: the previous month).")
    ] = None,
    room: Annotated[list[str] | None, typer.Option(help="Only this room (repeatable).")] = None,
    exam_type: Annotated[
        list[str] | None, typer.Option(help="Only this exam type, by code (repeatable).")
    ] = None,
    nightly: Annotated[
        bool, typer.Option("--nightly", help="Flag exams stored since the last nightly run.")
    ] = False,
    as_json: Annotated[bool, typer.Option("--json", help="Print the result as JSON.")] = False,
    csv_path: Annotated[Path | None, typer.Option("--csv", help="Write the groups as CSV.")] = None,
    xlsx_path: Annotated[
        Path | None, typer.Option("--xlsx", help="Write groups and flags as XLSX.")
    ] = None,
) -> None:
    """Review a month's exams against the reference levels; store the run and its flags.

    A review of the whole site is the month's record (the pages and the committee report show
    it); one of a room or an exam type is stored beside it. Exit code 0: reviewed; 1: no events
    in the month (nothing stored); 2: an unknown room or exam type, or a failure.
    """
    from beamaudit.api.cli._store import open_store
    from beamaudit.api.review import ReviewError
    from beamaudit.api.runs.record import NoEventsError

    store = open_store(ctx)
    try:
        if nightly:
            outcome = _nightly(store)
            if outcome is None:
                console.print("nightly review: no events yet this month; no review stored")
                return
            run_id, new_flags = outcome
        else:
            run_id = _monthly(store, month or _previous_month(), room, exam_type)
            new_flags = None
    except NoEventsError as exc:
        fail(str(exc), code=EXIT_PARTIAL)
    except ReviewError as exc:
        fail(str(exc))
    body = _stored_result(store, run_id)
    if body.get("status") == "failed":
        fail(f"review run {run_id} failed: {body.get('error')}")
    from beamaudit.api.cli.notify import send_notifications

    # a delivery that fails is one line on stderr; the review is stored whatever happens
    send_notifications(store, trigger="nightly" if nightly else "review", review_run_id=run_id)
    result = body["result"]
    if csv_path is not None or xlsx_path is not None:
        from beamaudit.api.runs.export import write_csv, write_xlsx

        if csv_path is not None:
            write_csv(result, csv_path)
        if xlsx_path is not None:
            write_xlsx(result, xlsx_path)
    if as_json:
        out = _json_summary(run_id, result, body["scope"])
        if new_flags is not None:
            out["new_flags"] = new_flags
        typer.echo(json.dumps(out, indent=2, default=str))
    else:
        _print(run_id, result, new_flags, body["scope_text"], body["names"])


def _monthly(store: Any, month: str, rooms: list[str] | None, exam_types: list[str] | None) -> int:
    from beamaudit.api.review import Period, ReviewParameters
    from beamaudit.api.runs.reviews import run_review

    period = Period.parse(month)
    params = ReviewParameters(
        period=period,
        rooms=tuple(rooms) if rooms else None,
        exam_types=tuple(exam_types) if exam_types else None,
        ct_size_band_edges_cm=tuple(store.settings.ct_size_band_edges_cm),
    )
    return run_review(store.sessions, params, kind="monthly")


def _nightly(store: Any) -> tuple[int, int] | None:
    """Review the current month so far; count flags on exams stored since the last nightly run.

    None when the month holds no event yet (nothing reviewed, nothing stored).
    """
    from sqlalchemy import select

    from beamaudit.api.review import Period, ReviewParameters
    from beamaudit.api.runs.record import NoEventsError
    from beamaudit.api.runs.reviews import run_review
    from beamaudit.api.store import models as m

    with store.sessions() as session:
        last = session.scalar(
            select(m.ReviewRun.started_at)
            .where(m.ReviewRun.kind == "nightly", m.ReviewRun.status == "done")
            .order_by(m.ReviewRun.started_at.desc())
            .limit(1)
        )
    today = datetime.now(UTC).date()
    start = today.replace(day=1)
    period = Period(start, today + timedelta(days=1))
    try:
        params = ReviewParameters(
            period=period, ct_size_band_edges_cm=tuple(store.settings.ct_size_band_edges_cm)
        )
        run_id = run_review(store.sessions, params, kind="nightly")
    except NoEventsError:
        return None
    with store.sessions() as session:
        stmt = (
            select(m.FlagRow.id)
            .join(m.ExposureEventRow, m.ExposureEventRow.id == m.FlagRow.event_id)
            .where(m.FlagRow.review_run_id == run_id)
        )
        if last is not None:
            stmt = stmt.where(m.ExposureEventRow.stored_at > last)
        new = len(session.scalars(stmt).all())
    return run_id, new


def _stored_result(store: Any, run_id: int) -> dict[str, Any]:
    from sqlalchemy import select

    from beamaudit.api.runs.record import scope_text
    from beamaudit.api.store import models as m

    with store.sessions() as session:
        run = session.get(m.ReviewRun, run_id)
        assert run is not None
        return {
            "status": run.status,
            "error": run.error,
            "result": run.result or {},
            "scope": run.scope or {},
            "scope_text": scope_text(run),
            "names": dict(session.execute(select(m.ExamTypeRow.code, m.ExamTypeRow.name)).all()),
        }


GROUP_FIELDS = (
    "site", "room", "device", "exam_type", "quantity", "unit", "n", "n_standard", "median",
    "q1", "q3", "mean", "ci_low", "ci_high", "reference_level", "level_set", "level_kind",
    "level_version", "ratio_to_level", "status",
)  # fmt: skip


def _json_summary(run_id: int, result: dict[str, Any], scope: dict[str, Any]) -> dict[str, Any]:
    return {
        "run_id": run_id,
        "period": result["period"]["label"],
        "scope": scope,
        "software_version": result["software_version"],
        "level_sets": result["level_sets"],
        "n_events": result["n_events"],
        "groups": [{k: g.get(k) for k in GROUP_FIELDS} for g in result["groups"]],
        "flags": result["flags"],
        "unmapped": result["unmapped"],
    }


def _print(
    run_id: int, result: dict[str, Any], new_flags: int | None, scope: str, names: dict[str, str]
) -> None:
    """The run in words that fit 80 columns: one block per room, examination and quantity, one
    line per level it was compared with (local, national, international guidance), the states
    in the words the pages use (:data:`beamaudit.dashboards.VOCABULARY`)."""
    from beamaudit.dashboards import CAUTION
    from beamaudit.dashboards.wording import FLAG_KIND_WORDS, words_for

    console.print(
        f"review run {run_id} ({scope}): {result['n_events']} events, "
        f"{len(result['groups'])} group rows, {len(result['flags'])} flags",
        highlight=False,
    )
    for line in group_lines(result["groups"], names):
        console.print(line, highlight=False, markup=False)
    flags = result["flags"]
    if flags:
        console.print("\nflags:", highlight=False)
    for flag in flags[:40]:
        kind = words_for(FLAG_KIND_WORDS, flag["kind"])
        console.print(f"- {kind}: {flag['reason']}", highlight=False, markup=False)
    if len(flags) > 40:
        console.print(f"... and {len(flags) - 40} more (--json for all)", highlight=False)
    if new_flags is not None:
        console.print(f"new flags since the last nightly run: {new_flags}", highlight=False)
    import textwrap

    console.print(textwrap.fill(CAUTION, 80), style="dim", highlight=False, markup=False)


def group_lines(groups: list[dict[str, Any]], names: dict[str, str] | None = None) -> list[str]:
    """The groups that were compared with a level, as text lines of at most 80 characters
    (examinations by their catalogue ``names``, where given)."""
    import textwrap

    from beamaudit.dashboards import VOCABULARY
    from beamaudit.dashboards.rounding import format_level, format_number, format_quantity
    from beamaudit.dashboards.wording import quantity_short, short_group_label, words_for

    lines: list[str] = []
    last: tuple[Any, ...] | None = None
    for g in groups:
        if g.get("reference_level") is None:
            continue
        q = str(g["quantity"])
        # a paediatric band's group is its own block, named (ICRP 135 levels per band)
        group = short_group_label(g.get("patient_group_label")) if g.get("patient_group") else ""
        key = (g.get("room"), g.get("exam_type"), group, q)
        if key != last:
            last = key
            exam = (names or {}).get(str(g.get("exam_type"))) or g.get("exam_type")
            who = f", {group}" if group else ""
            head = f"{g.get('room')} · {exam}{who} · {quantity_short(q)}"
            lines += ["", *textwrap.wrap(head, 80)]
            ci = ""
            if g.get("ci_low") is not None and g.get("ci_high") is not None:
                coverage = g.get("ci_coverage")
                level = f"{float(coverage) * 100:.0f}% CI" if coverage else "CI"
                ci = f" ({level} {format_number(g['ci_low'])}–{format_quantity(g['ci_high'], q)})"
            n = int(g["n"])
            lines += textwrap.wrap(
                f"median {format_quantity(g.get('median'), q)}{ci}; {n} exam{'' if n == 1 else 's'}"
                f", {g['n_standard']} standard-size",
                80, initial_indent="  ", subsequent_indent="    ",
            )  # fmt: skip
        kind = words_for(VOCABULARY["level kind"], g.get("level_kind"))
        status = words_for(VOCABULARY["review status"], g.get("status"))
        ratio = format_number(g.get("ratio_to_level"))
        lines += textwrap.wrap(
            f"{kind} {format_level(g['reference_level'], q)} ({g.get('level_set')}): "
            f"median ÷ level {ratio}, {status}",
            80, initial_indent="  ", subsequent_indent="    ",
        )  # fmt: skip
    return lines


def nightly_command(
    ctx: typer.Context,
    as_json: Annotated[bool, typer.Option("--json", help="Print the report as JSON.")] = False,
) -> None:
    """Pull every configured DICOMweb source, run the nightly review, then send the digests of
    new findings ([notify]; the outbox file when no server is configured).

    Exit code 0: nothing new flagged; 1: new flags; 2: failure (a source, the review or a
    notification; the review is stored whatever a notification does).
    """
    from sqlalchemy import select

    from beamaudit.api.cli._store import open_store
    from beamaudit.api.cli.scan import pseudonym_key
    from beamaudit.api.intake.pulling import pull_source
    from beamaudit.api.review import ReviewError
    from beamaudit.api.store import models as m
    from beamaudit.ingest.errors import IngestError
    from beamaudit.ingest.pseudonym import Pseudonymiser

    store = open_store(ctx)
    pseudonymiser = Pseudonymiser(pseudonym_key(store.settings.secret_key_path))
    with store.sessions() as session:
        sources = [
            (s.url, list(s.modalities or []), s.watermark_date)
            for s in session.scalars(select(m.DicomwebSource).where(m.DicomwebSource.enabled))
        ]
    report: dict[str, Any] = {"pulls": [], "failed": []}
    # a source that fails (unreachable, refusing, too slow, no login) is reported; the other
    # sources and the review go on, and the exit code says 2
    for url, modalities, watermark in sources:
        try:
            since = (
                "last" if watermark else (datetime.now(UTC).date() - timedelta(days=1)).isoformat()
            )
            outcome = pull_source(
                store.sessions, url=url, since=since, modalities=modalities or None,
                pseudonymiser=pseudonymiser, settings=store.settings,
            )  # fmt: skip
            report["pulls"].append(outcome.as_dict())
        except IngestError as exc:
            report["failed"].append({"source": url, "reason": exc.reason})
    run_id: int | None = None
    new_flags = 0
    try:
        reviewed = _nightly(store)
        if reviewed is not None:
            run_id, new_flags = reviewed
    except ReviewError as exc:
        report["failed"].append({"source": "review", "reason": str(exc)})
    report["review_run_id"] = run_id
    report["new_flags"] = new_flags
    from beamaudit.api.runs.notify import notify_new_findings

    deliveries = notify_new_findings(
        store.sessions, store.settings.notify, trigger="nightly", review_run_id=run_id
    )
    report["notifications"] = [d.__dict__ for d in deliveries]
    for d in deliveries:
        if d.status != "sent":
            report["failed"].append(
                {"source": f"notify {d.recipient} by {d.channel}", "reason": d.error}
            )
    if as_json:
        typer.echo(json.dumps(report, indent=2, default=str))
    else:
        for p in report["pulls"]:
            console.print(
                f"pulled {p['source']}: {p['events']} new events, {len(p['errors'])} rejected",
                highlight=False,
            )
        for d in deliveries:
            if d.status == "sent":
                console.print(d.line(), highlight=False, markup=False)
        for f in report["failed"]:
            err_console.print(f"failed: {f['source']}: {f['reason']}", markup=False)
        if run_id is None and not report["failed"]:
            console.print("nightly review: no events yet this month; no review stored")
        else:
            console.print(f"nightly review run {run_id}: {new_flags} new flags", highlight=False)
    if report["failed"]:
        raise typer.Exit(2)
    if new_flags:
        raise typer.Exit(1)


@levels_app.command("import")
def levels_import(
    ctx: typer.Context,
    path: Annotated[
        Path | None,
        typer.Argument(
            metavar="FILE.csv",
            help="Levels CSV: one row per value, the layout 'beamaudit levels export' writes.",
        ),
    ] = None,
    shipped: Annotated[
        str | None,
        typer.Option(
            "--shipped",
            metavar="NAME",
            help="Import a level file shipped with beamaudit instead of FILE.csv: 'national' "
            "(values read in their published sources) or 'mammography' (mean glandular dose "
            "per view for a standard breast, recalled: each value's source gives its confidence).",
        ),
    ] = None,
) -> None:
    """Import reference-level set versions from a CSV file (all or none)."""
    from beamaudit.api.cli._store import open_store
    from beamaudit.api.review import CsvFormatError, ReviewError, read_levels_csv
    from beamaudit.api.review.levels import SHIPPED_LEVEL_FILES, load_shipped_levels
    from beamaudit.api.store.level_sets import add_level_sets
    from beamaudit.api.store.review_rows import ensure_catalogue

    if (path is None) == (shipped is None):
        fail("give either FILE.csv or --shipped NAME")
    if path is not None and not path.is_file():
        fail(f"no such file: {path}")
    if shipped is not None and shipped not in SHIPPED_LEVEL_FILES:
        fail(f"no shipped level file {shipped!r} (shipped: {', '.join(SHIPPED_LEVEL_FILES)})")
    store = open_store(ctx)
    try:
        with store.sessions.begin() as session:
            catalogue, _ = ensure_catalogue(session)
            sets = (
                read_levels_csv(path, catalogue)
                if path is not None
                else load_shipped_levels(str(shipped))
            )
            rows = add_level_sets(session, sets, actor="cli")
            names = [f"{r.name} {r.version}" for r in rows]
    except CsvFormatError as exc:
        fail(str(exc))
    except ReviewError as exc:
        fail(str(exc))
    console.print(f"imported {len(names)} set version(s): {', '.join(names)}", highlight=False)


@levels_app.command("export")
def levels_export(
    ctx: typer.Context,
    output: Annotated[
        Path | None, typer.Option("--output", "-o", help="File (default: stdout).")
    ] = None,
    include_retired: Annotated[bool, typer.Option(help="Also retired sets.")] = False,
) -> None:
    """Export every stored reference-level set as CSV (the layout ``levels import`` reads)."""
    from beamaudit.api.cli._store import open_store
    from beamaudit.api.review import write_levels_csv
    from beamaudit.api.store.review_rows import level_sets_from_store

    store = open_store(ctx)
    with store.sessions() as session:
        sets = [s for _, s in level_sets_from_store(session, include_retired=include_retired)]
    text = write_levels_csv(sets) or ""
    if output is None:
        sys.stdout.write(text)
    else:
        output.write_text(text, encoding="utf-8")


@levels_app.command("list")
def levels_list(ctx: typer.Context) -> None:
    """List stored reference-level sets."""
    from rich.table import Table
    from sqlalchemy import Date, text

    from beamaudit.api.cli._store import open_store

    store = open_store(ctx, writes=False)
    table = Table("id", "name", "kind", "version", "effective from", "retired")
    # a plain statement: a listing need not map the store's tables as classes (a tenth of a
    # second of start-up; benchmarks/bench_startup.py)
    sets = text(
        "SELECT id, name, kind, version, effective_from, retired_at IS NOT NULL AS retired "
        "FROM reference_level_sets ORDER BY id"
    ).columns(effective_from=Date)
    with store.engine.connect() as conn:
        for r in conn.execute(sets):
            table.add_row(str(r.id), r.name, r.kind, r.version, str(r.effective_from),
                          "yes" if r.retired else "")  # fmt: skip
    console.print(table)


@examtypes_app.command("export")
def examtypes_export(
    ctx: typer.Context,
    what: Annotated[str, typer.Argument(help="catalogue or rules")] = "rules",
) -> None:
    """Export the exam-type catalogue or the mapping rules as CSV to standard output."""
    from beamaudit.api.cli._store import open_store
    from beamaudit.api.review import write_catalogue_csv, write_rules_csv
    from beamaudit.api.store.review_rows import ensure_catalogue

    if what not in {"catalogue", "rules"}:
        fail(f"export what? catalogue or rules, not {what!r}")
    store = open_store(ctx)
    with store.sessions.begin() as session:
        catalogue, rules = ensure_catalogue(session)
    sys.stdout.write(
        (write_catalogue_csv(catalogue) if what == "catalogue" else write_rules_csv(rules)) or ""
    )


@examtypes_app.command("remap")
def examtypes_remap(ctx: typer.Context) -> None:
    """Map every stored event to an exam type again (after the rules changed)."""
    from beamaudit.api.cli._store import open_store
    from beamaudit.api.store.review_rows import map_stored_events

    store = open_store(ctx)
    with store.sessions.begin() as session:
        n = map_stored_events(session)
    console.print(f"{n} events mapped to an exam type")


def register(app: typer.Typer) -> None:
    """Add ``review``, ``nightly``, ``levels`` and ``examtypes`` to ``app``."""
    app.command("review")(review_command)
    app.command("nightly")(nightly_command)
    app.add_typer(levels_app, name="levels")
    app.add_typer(examtypes_app, name="examtypes")

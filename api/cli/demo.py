"""``beamaudit demo``: the whole job on an invented hospital, then the dashboards."""

from __future__ import annotations

import json
import time
from pathlib import Path
from typing import Annotated, Any

import typer

from beamaudit.api.cli._common import EXIT_PARTIAL, console, fail

__all__ = ["register"]


def demo_command(
    output: Annotated[
        Path, typer.Option(help="Folder for the files and the demo database.")
    ] = Path("demo-output"),
    months: Annotated[int, typer.Option(min=3, max=24, help="Months of exams to invent.")] = 4,
    seed: Annotated[int, typer.Option(min=0, help="Seed of every random draw.")] = 0,
    end_month: Annotated[
        str | None, typer.Option(help="Last month YYYY-MM (default: the last complete month).")
    ] = None,
    serve: Annotated[
        bool, typer.Option("--serve/--no-serve", help="Serve the dashboards after.")
    ] = True,
    port: Annotated[int, typer.Option(min=1, max=65535)] = 8000,
    as_json: Annotated[bool, typer.Option("--json", help="Print the findings as JSON.")] = False,
) -> None:
    """Invent a hospital's exams as DICOM files, ingest them by folder scan and C-STORE, review
    every month, show what was found beside what was planted, and serve the dashboards.

    Everything is invented. Exit code 1 when a planted finding was not found or an unplanted
    flag was raised.
    """
    import shutil

    from beamaudit.api.demo.errors import DemoError
    from beamaudit.api.demo.run import compare_with_plan, run_demo
    from beamaudit.api.store import make_engine, make_session_factory, upgrade
    from beamaudit.api.store.auth import create_token
    from beamaudit.ingest.pseudonym import load_or_create_key

    t0 = time.perf_counter()
    output.mkdir(parents=True, exist_ok=True)
    db = output / "beamaudit-demo.db"
    for stale in output.glob("beamaudit-demo.db*"):
        stale.unlink()
    if (output / "dicom").exists():
        shutil.rmtree(output / "dicom")
    url = f"sqlite:///{db.resolve()}"
    engine = make_engine(url)
    upgrade(engine)
    sessions = make_session_factory(engine)
    key = load_or_create_key(output / "demo-pseudonym.key")
    try:
        outcome = run_demo(
            sessions, output=output, months=months, seed=seed, key=key, end_month=end_month
        )
    except DemoError as exc:
        fail(str(exc))
    t_summary = time.perf_counter()
    report = compare_with_plan(outcome)
    missed = [p for p in report["planted"] if not p["found"] and p.get("required", True)]
    outcome.timings["compare"] = time.perf_counter() - t_summary
    elapsed = time.perf_counter() - t0
    if as_json:
        typer.echo(
            json.dumps(
                {
                    **report,
                    "elapsed_s": elapsed,
                    "timings_s": {k: round(v, 2) for k, v in outcome.timings.items()},
                    "scan": outcome.scan,
                    "cstore": outcome.cstore,
                    "notifications": outcome.notifications,
                    "outbox": str(outcome.outbox) if outcome.outbox else None,
                    "database": url,
                },
                indent=2,
                default=str,
            )
        )
    else:
        _print(outcome, report, elapsed, db)
    from beamaudit.api.cli._serving import sign_in_words

    if serve:
        with sessions.begin() as session:
            _, token = create_token(session, role="physicist", name="demo physicist", actor="demo")
        sign_in = sign_in_words("127.0.0.1", port, token=token)
        console.print(f"\nDashboards: http://127.0.0.1:{port}/\n{sign_in}", highlight=False)
        import uvicorn

        from beamaudit.api.settings import load
        from beamaudit.api.web.app import create_app

        uvicorn.run(
            create_app(load(database_url=url), engine=engine),
            host="127.0.0.1",
            port=port,
            log_level="warning",
        )
        return
    if not as_json:  # how to look at it later
        console.print(
            f"\nTo look at it: BEAMAUDIT_DATABASE_URL={url} beamaudit serve --port {port}\n"
            f"and in another terminal make a token: BEAMAUDIT_DATABASE_URL={url} beamaudit token "
            f"create --role physicist\nthen sign in at http://127.0.0.1:{port}/login with it.",
            highlight=False,
            soft_wrap=True,
        )
    if missed or report["unplanted"]:
        raise typer.Exit(EXIT_PARTIAL)


def _indented(text: str, first: str = "         ") -> str:
    """``text`` whole (never cut mid-word), wrapped to 80 columns under its heading."""
    import textwrap

    return "\n".join(textwrap.wrap(text, 80, initial_indent=first, subsequent_indent="         "))


def _print(outcome: Any, report: dict[str, Any], elapsed: float, db: Path) -> None:
    from beamaudit.dashboards import CAUTION
    from beamaudit.dashboards.wording import FLAG_KIND_WORDS, words_for

    m = outcome.manifest
    console.print(
        f"[bold]{m['institution']}[/bold] (invented): {len(m['rooms'])} rooms, months "
        f"{m['months'][0]} to {m['months'][-1]}; {m['counts']['files']} DICOM files",
        highlight=False,
    )
    s = outcome.scan
    console.print(
        f"folder scan: {s['files']} files, {s['events']} events, {len(s['errors'])} rejected; "
        f"C-STORE: {outcome.cstore.get('success', 0)} stored, "
        f"{outcome.cstore.get('failure', 0)} refused",
        highlight=False,
    )
    console.print("\nplanted findings:")
    for p in report["planted"]:
        if p["found"]:
            mark = "[green]found[/green]"
        elif p["required"]:
            mark = "[red]NOT FOUND[/red]"
        else:  # a consequence the review may or may not surface (see the demo's README)
            mark = "[dim]not seen (may fire)[/dim]"
        kind = words_for(FLAG_KIND_WORDS, p["kind"])
        console.print(f"  {mark}  {p['plant']} ({kind})", highlight=False)
        if p["by"]:
            console.print(_indented(p["by"][0]), markup=False, highlight=False)
    console.print(f"\nflags not planted by the scenario: {len(report['unplanted'])}")
    for f in report["unplanted"][:10]:
        kind = words_for(FLAG_KIND_WORDS, f["kind"])
        console.print(_indented(f"{kind}: {f['reason']}", "  "), markup=False, highlight=False)
    _print_notifications(outcome)
    console.print(
        f"\ndone in {elapsed:.0f} s; database: SQLite file {db.resolve()}. Where to look: the "
        "overview (/) opens with what needs attention in the newest month (the DAP-meter fault, "
        "the doubled dose, the single exams above the investigation level); the flags page lists "
        "every finding.",
        highlight=False,
    )
    phases = ", ".join(f"{k} {v:.1f}" for k, v in outcome.timings.items())
    console.print(f"[dim]seconds per phase: {phases}[/dim]", highlight=False)
    console.print(f"[dim]All data are invented. {CAUTION}[/dim]", highlight=False)


def _print_notifications(outcome: Any) -> None:
    """The nightly notification step: what was sent where, and the digest's first lines."""
    import json

    console.print("\nnightly notifications (no mail server or webhook configured: the outbox):")
    if not outcome.notifications:
        console.print("  nothing new to tell", highlight=False)
        return
    for d in outcome.notifications:
        console.print(
            f"  {d['recipient']}: {d['findings']} new findings, {d['status']} to {d['target']}",
            markup=False, highlight=False,
        )  # fmt: skip
    lines = outcome.outbox.read_text(encoding="utf-8").splitlines() if outcome.outbox else []
    if lines:
        digest = json.loads(lines[-1])
        console.print(f"  subject: {digest['subject']}", markup=False, highlight=False)
        for item in digest["findings"][:3]:
            line = _indented(f"[{item['severity']}] {item['reason']}", "    ")
            console.print(line, markup=False, highlight=False)
            console.print(f"      {item['link']}", markup=False, highlight=False)


def register(app: typer.Typer) -> None:
    """Add ``demo`` to ``app``."""
    app.command("demo")(demo_command)

"""Proposed local DRLs of a review run, adopting them as a new local set version, and the
recurrent-exposure list.

A proposal is for the committee to consider beside the current levels; adopting it stores a new,
audited version of a local set (:func:`beamaudit.api.runs.local_levels.adopt_proposals`). The
recurrent list shows pseudonyms, counts and sums only, with its caution: prior dose must never
decide whether a justified examination is done.
"""

from __future__ import annotations

from datetime import date
from typing import Annotated

from fastapi import HTTPException, Query, status

from beamaudit import CAUTION
from beamaudit.api.runs.local_levels import (
    AdoptionError,
    ProposalKey,
    adopt_proposals,
    proposal_rows,
    record_run,
)
from beamaudit.api.web.deps import DbSession, Physicist, Viewer
from beamaudit.api.web.routes._common import AUTH_RESPONSES, CONFLICT, NOT_FOUND, invalid
from beamaudit.api.web.routing import Router
from beamaudit.api.web.schemas.base import EARLIEST_DATE, LATEST_DATE, MAX_ID
from beamaudit.api.web.schemas.levels import LevelSetRead
from beamaudit.api.web.schemas.local_levels import ProposalAdopt, ProposalsRead, RecurrentRead

__all__ = ["router"]

router = Router(tags=["levels"], responses=AUTH_RESPONSES)


@router.get(
    "/local-level-proposals",
    operation_id="list_local_level_proposals",
    response_model=ProposalsRead,
    responses=NOT_FOUND,
)
def list_local_level_proposals(
    session: DbSession,
    _: Viewer,
    run_id: Annotated[
        int | None,
        Query(ge=1, le=MAX_ID, description="a done run; default the newest whole-site run"),
    ] = None,
) -> ProposalsRead:
    """Typical values and proposed local DRLs of a review run, beside the current levels."""
    run = record_run(session, run_id)
    if run is None and run_id is not None:
        raise HTTPException(status.HTTP_404_NOT_FOUND, f"review run {run_id} has no result")
    return ProposalsRead(
        run_id=run.id if run else None,
        period=run.period if run else None,
        rows=proposal_rows(run) if run else [],
        caution=CAUTION,
    )


@router.post(
    "/local-level-proposals/adopt",
    operation_id="adopt_local_level_proposals",
    response_model=LevelSetRead,
    status_code=status.HTTP_201_CREATED,
    responses={**NOT_FOUND, **CONFLICT},
)
def adopt_local_level_proposals(
    body: ProposalAdopt, session: DbSession, who: Physicist
) -> LevelSetRead:
    """Store a new version of a local set with the chosen proposals of one run and site."""
    from beamaudit.api.web.routes.levels import read_set

    run = record_run(session, body.run_id)
    if run is None:
        raise HTTPException(status.HTTP_404_NOT_FOUND, f"review run {body.run_id} has no result")
    keys = (
        None
        if body.choices is None
        else [
            ProposalKey(c.exam_type, c.quantity, c.patient_group, c.clinical_indication)
            for c in body.choices
        ]
    )
    try:
        row = adopt_proposals(
            session,
            run=run,
            site=body.site,
            set_name=body.set_name,
            version=body.version,
            effective_from=body.effective_from,
            source=body.source,
            keys=keys,
            actor=who.actor,
        )
    except AdoptionError as exc:
        session.rollback()
        raise HTTPException(status.HTTP_409_CONFLICT, detail=str(exc)) from None
    session.commit()
    return read_set(session, row)


@router.get(
    "/recurrent-exposure", operation_id="list_recurrent_exposure", response_model=RecurrentRead
)
def list_recurrent_exposure(
    session: DbSession,
    _: Physicist,
    as_of: Annotated[date | None, Query(description="end of the window; default today")] = None,
    window_years: Annotated[float, Query(gt=0, le=50)] = 5.0,
    level_msv: Annotated[float, Query(gt=0, le=100000)] = 100.0,
) -> RecurrentRead:
    """Pseudonymised patients whose cumulative effective dose in the window reached the level."""
    from beamaudit.api.runs.recurrent import recurrent_exposure

    if as_of is not None and not EARLIEST_DATE <= as_of <= LATEST_DATE:
        invalid(("query", "as_of"), f"as_of must lie between {EARLIEST_DATE} and {LATEST_DATE}")
    found = recurrent_exposure(
        session, as_of=as_of or date.today(), window_years=window_years, level_msv=level_msv
    )
    return RecurrentRead.model_validate({**found.__dict__, "caution": f"{found.caution} {CAUTION}"})

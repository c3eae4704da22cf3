from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, File, Header, Request, Response, UploadFile

from app.api.body import raw_body
from app.api.deps import DbDep, PostMeasurement
from app.api.problems import PROBLEM_RESPONSES
from app.schemas.measurements import ImportRead, MeasurementCreate, MeasurementRead
from app.services import imports, measurements

router = APIRouter(prefix="/api/v1", tags=["measurements"], responses=PROBLEM_RESPONSES)


@router.post(
    "/measurements", response_model=MeasurementRead, status_code=201,
    responses={200: {"model": MeasurementRead, "description": "Replay of an Idempotency-Key"}},
)
def post_measurement(
    data: MeasurementCreate,
    request: Request,
    response: Response,
    db: DbDep,
    who: PostMeasurement,
    idempotency_key: Annotated[str | None, Header(max_length=200)] = None,
) -> MeasurementRead:
    """Post one layer's overlay measurement of one panel and side; answers the fit and the
    panel's updated state. A repeat for the same panel, layer and side supersedes."""
    replayed, answer = measurements.accept(
        db=db, data=data, principal=who, body=raw_body(request),
        idempotency_key=idempotency_key,
    )
    if replayed:
        response.status_code = 200
    return answer


@router.post(
    "/imports", response_model=ImportRead, status_code=201,
    responses={200: {"model": ImportRead, "description": "Repeat of a file already imported "
                     "(same content, or same Idempotency-Key and content)"}},
)
def post_import(
    db: DbDep,
    who: PostMeasurement,
    response: Response,
    file: Annotated[UploadFile, File()],
    idempotency_key: Annotated[str | None, Header(max_length=200)] = None,
) -> ImportRead:
    """Import a CSV file of site rows, all or nothing; errors give file line, column and
    message. The same content sent again by the same key is answered as a repeat (200)."""
    repeat, answer = imports.import_csv(
        db=db, stream=file.file, name=(file.filename or "upload.csv")[:200],
        principal_label=who.label, owner=who.key_id, idempotency_key=idempotency_key,
    )
    if repeat:
        response.status_code = 200
    return answer

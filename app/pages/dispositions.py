"""The disposition form's two steps: review (what will happen, nothing written) and confirm
(the same holds service the API calls)."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Form, Request
from fastapi.responses import RedirectResponse, Response
from pydantic import ValidationError

from app.api.deps import DbDep
from app.errors import DomainError, FieldError, InvalidInput
from app.pages.common import User, refused, render, require
from app.schemas.holds import DispositionCreate
from app.services import holds

router = APIRouter(include_in_schema=False)


def _data(action: str, note: str, rework_side: str, rework_layer: str) -> DispositionCreate:
    try:
        return DispositionCreate(
            action=action, note=note,
            side=(rework_side or None) if action == "rework" else None,
            layer=(int(rework_layer) if rework_layer.strip() else None)
            if action == "rework" else None,
        )
    except (ValidationError, ValueError) as exc:
        problems = (exc.errors() if isinstance(exc, ValidationError)
                    else [{"loc": ("rework_layer",), "msg": "must be a whole number"}])
        raise InvalidInput("the disposition form is not complete", [
            FieldError(f"{'/'.join(str(p) for p in e['loc'])}: {e['msg']}") for e in problems
        ]) from exc


@router.post("/holds/{hold_id}/disposition", response_model=None)
def disposition(
    request: Request, hold_id: str, db: DbDep, user: User,
    csrf: Annotated[str, Form(max_length=200)] = "",
    step: Annotated[str, Form(max_length=10)] = "review",
    action: Annotated[str, Form(max_length=10)] = "",
    note: Annotated[str, Form(max_length=4000)] = "",
    rework_side: Annotated[str, Form(max_length=1)] = "",
    rework_layer: Annotated[str, Form(max_length=3)] = "",
) -> Response:
    try:
        user.check_csrf(csrf)
        require(user, "disposition")
        data = _data(action, note, rework_side, rework_layer)
        if step != "confirm":
            hold = holds.review_disposition(db=db, hold_id=hold_id, data=data)
            return render(request, "confirm.html", user, data=data, hold=hold)
        closed = holds.dispose(db=db, hold_id=hold_id, data=data, principal=user.principal)
    except DomainError as exc:
        return refused(request, user, exc)
    return RedirectResponse(f"/panels/{closed.panel}?disposed={closed.disposition}",
                            status_code=303)

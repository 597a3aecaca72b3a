"""API keys, for administrators. The secret is shown once, at creation."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Path, Request, Response, status

from service.access import auth
from service.access.schemas import ApiKeyCreated, ApiKeyIn, ApiKeyOut, api_key_out
from service.core.audit import write_audit
from service.core.deps import ADMIN, ReadSession, WriteSession
from service.core.responses import problems
from service.core.schemas import Page

router = APIRouter(prefix="/v1/api-keys", tags=["api keys"])


@router.post(
    "",
    response_model=ApiKeyCreated,
    status_code=status.HTTP_201_CREATED,
    dependencies=[ADMIN],
    operation_id="create_api_key",
    summary="Create an API key",
    responses=problems(422),
)
def create_api_key(body: ApiKeyIn, session: WriteSession, request: Request) -> ApiKeyCreated:
    new = auth.create_key(session, name=body.name, scopes=list(body.scopes))
    write_audit(
        session,
        actor_key_id=request.state.key_id,
        action="create_api_key",
        subject=f"key:{new.row.id}",
        details={"name": new.row.name, "scopes": list(new.row.scopes)},
    )
    return ApiKeyCreated(**api_key_out(new.row).model_dump(), secret=new.secret)


@router.get(
    "",
    response_model=Page[ApiKeyOut],
    dependencies=[ADMIN],
    operation_id="list_api_keys",
    summary="List API keys (never their secrets)",
    responses=problems(),
)
def list_api_keys(session: ReadSession) -> Page[ApiKeyOut]:
    return Page[ApiKeyOut](
        items=[api_key_out(r) for r in auth.list_keys(session)], next_cursor=None
    )


@router.delete(
    "/{key_id}",
    status_code=status.HTTP_204_NO_CONTENT,
    dependencies=[ADMIN],
    operation_id="revoke_api_key",
    summary="Revoke an API key",
    responses=problems(404, 422),
)
def revoke_api_key(
    key_id: Annotated[str, Path(pattern=r"^[0-9a-f]{1,16}$")],
    session: WriteSession,
    request: Request,
) -> Response:
    auth.revoke_key(session, key_id=key_id)
    write_audit(
        session,
        actor_key_id=request.state.key_id,
        action="revoke_api_key",
        subject=f"key:{key_id}",
        details={},
    )
    return Response(status_code=status.HTTP_204_NO_CONTENT)

from fastapi import APIRouter, Depends

from ..clock import normalize_rfc3339
from ..errors import Invalid
from ..operations import Monitor
from ..schemas import KeyCreate, KeyCreated, KeyPublic
from .deps import Id, admin, monitor

router = APIRouter(prefix="/v1/keys", tags=["keys"])


@router.post("", status_code=201, response_model=KeyCreated,
             summary="Create an API key; the key is shown only in this answer (admin)")
def create_key(body: KeyCreate, actor=Depends(admin), m: Monitor = Depends(monitor)):
    expires = None
    if body.expires_at is not None:
        try:
            expires = normalize_rfc3339(body.expires_at)[1]
        except ValueError as exc:
            raise Invalid(f"expires_at {exc}", field="expires_at") from None
    row, key = m.store.add_key(body.role, body.label, m.clock(), actor, expires_at=expires)
    return {**row, "key": key}


@router.get("", response_model=list[KeyPublic], summary="API keys, without the keys (admin)")
def list_keys(actor=Depends(admin), m: Monitor = Depends(monitor)):
    return m.store.keys()


@router.post("/{key_id}/revoke", response_model=KeyPublic, summary="Revoke an API key (admin)")
def revoke_key(key_id: Id, actor=Depends(admin), m: Monitor = Depends(monitor)):
    return m.store.revoke_key(key_id, m.clock(), actor)

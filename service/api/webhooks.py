from fastapi import APIRouter, Depends, Query

from ..operations import Monitor
from ..schemas import DeliveryPage, DeliveryPublic, WebhookCreate, WebhookCreated, WebhookPublic
from ..webhooks import new_secret
from .deps import Id, Offset, admin, monitor

router = APIRouter(prefix="/v1/webhooks", tags=["webhooks"])


@router.post("", status_code=201, response_model=WebhookCreated,
             summary="Subscribe a URL to alert kinds; the secret is shown only here (admin)")
def subscribe(body: WebhookCreate, actor=Depends(admin), m: Monitor = Depends(monitor)):
    secret = body.secret or new_secret()
    hook = m.store.add_webhook(body.url, secret, list(body.kinds), m.clock(), actor)
    return {**hook, "secret": secret}


@router.get("", response_model=list[WebhookPublic], summary="Subscriptions (admin)")
def list_hooks(actor=Depends(admin), m: Monitor = Depends(monitor)):
    return m.store.webhooks()


@router.delete("/{hook_id}", response_model=WebhookPublic,
               summary="Stop a subscription; pending deliveries are cancelled (admin)")
def delete_hook(hook_id: Id, actor=Depends(admin), m: Monitor = Depends(monitor)):
    return m.store.disable_webhook(hook_id, "deleted by admin", m.clock(), actor)


@router.get("/{hook_id}/deliveries", response_model=DeliveryPage,
            summary="Deliveries of a subscription with every attempt (admin)")
def deliveries(hook_id: Id, limit: int = Query(100, ge=1, le=1000), offset: Offset = 0,
               actor=Depends(admin), m: Monitor = Depends(monitor)):
    rows, total = m.store.deliveries(hook_id, limit, offset)
    return {"items": rows, "total": total, "limit": limit, "offset": offset}


@router.post("/{hook_id}/deliveries/{delivery_id}/retry", status_code=202,
             response_model=DeliveryPublic, summary="Send a delivery again now (admin)")
def retry(hook_id: Id, delivery_id: Id, actor=Depends(admin), m: Monitor = Depends(monitor)):
    return m.store.retry_delivery(hook_id, delivery_id, m.clock(), actor)

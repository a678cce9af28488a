"""HTTP front end: routing as a service over one workspace, as thin as the command line.

Endpoints (JSON in, JSON out):
    POST /v1/route         one item {"id", "fields", "arrived_at"} or {"items": [...]}: decide, store, answer
    POST /v1/corrections   {"item_id", "queue", "by", "new_queue"}: journal, learn at once, answer the item's
                           new decision (an Idempotency-Key header makes a repeat return the first outcome)
    GET  /v1/health        liveness, the served model version, and why the service is degraded (no token,
                           never waits on the workspace)
    GET  /v1/model         the active model: version, text model, queues, cutoffs, never-auto queues, ...
    GET  /openapi.json     the OpenAPI 3.1 description of all of the above

Modules, one job each: `app` (the ASGI app and the uvicorn server around it), `handlers` (the endpoints),
`validation` (request bodies), `groups` (the group commit of routes), `guards` (bind rule, token, browser
guard), `errors` (statuses and error bodies), `openapi` (the document).
"""

from triage.service.app import create_app, serve, server_config
from triage.service.errors import ApiError
from triage.service.guards import MIN_TOKEN_CHARS, check_bind, is_loopback
from triage.service.openapi import OPENAPI, openapi_document

__all__ = ["create_app", "serve", "server_config", "check_bind", "is_loopback", "OPENAPI", "openapi_document",
           "ApiError", "MIN_TOKEN_CHARS"]

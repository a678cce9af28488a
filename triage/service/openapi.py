"""The OpenAPI 3.1 description of the service, written out by hand.

Written by hand rather than generated: the service has six routes and no framework models, and the document
is a contract (tests hold every answer to it, and the schema-driven test sends requests built from it).
`openapi_document` fills in one workspace's field names and value types.
"""

from __future__ import annotations

import copy
from typing import Any

from triage.app import Schema
from triage.service.validation import MAX_BY_CHARS, MAX_ID_CHARS, MAX_NAME_CHARS

API_VERSION = "1.1.0"

_ERROR_REF = {"$ref": "#/components/schemas/Error"}


def _answer(description: str) -> dict[str, Any]:
    return {"description": description, "content": {"application/json": {"schema": _ERROR_REF}}}


OPENAPI: dict[str, Any] = {
    "openapi": "3.1.0",
    "info": {
        "title": "triage routing service",
        "version": API_VERSION,
        "description": "Route items (tickets, leads) into queues, explain each decision, learn from corrections. "
                       "Errors are {error, field}. When the server has a token, /metrics and every /v1/ path "
                       "except /v1/health need 'Authorization: Bearer <token>'.",
    },
    "servers": [{"url": "http://127.0.0.1:8477"}],
    "security": [{"bearer": []}],
    "paths": {
        "/v1/route": {
            "post": {
                "summary": "Decide the queue of one item or a batch; the items and decisions are stored",
                "operationId": "route",
                "requestBody": {"required": True, "content": {"application/json": {"schema": {
                    "oneOf": [{"$ref": "#/components/schemas/Item"},
                              {"$ref": "#/components/schemas/ItemBatch"}]}}}},
                "responses": {
                    "200": {"description": "The decision (one item) or the decisions in order (a batch)",
                            "content": {"application/json": {"schema": {"oneOf": [
                                {"$ref": "#/components/schemas/RouteOne"},
                                {"$ref": "#/components/schemas/RouteMany"}]}}}},
                    "400": _answer("The body is not JSON, or the Host header is not one this service answers to"),
                    "401": _answer("No or wrong bearer token"),
                    "403": _answer("A cross-origin request (Origin or Sec-Fetch-Site), refused"),
                    "409": _answer("No model trained yet, or an id already stored with other field values"),
                    "413": _answer("The body or the batch is over the limit"),
                    "422": _answer("A value of the wrong type or shape; `field` names it"),
                    "415": _answer("The body is not sent as application/json"),
                    "503": _answer("Not done: the time limit passed before the work started, or the store is "
                                   "locked; Retry-After says when to try again"),
                    "507": _answer("Not done: the workspace's disk is full"),
                },
            }
        },
        "/v1/corrections": {
            "post": {
                "summary": "Correct an item's queue: journaled, learned at once, the next decision uses it",
                "operationId": "correct",
                "parameters": [{"name": "Idempotency-Key", "in": "header", "required": False,
                                "schema": {"type": "string", "minLength": 1, "maxLength": 200},
                                "description": "A key unique to this correction: a repeat with the same key "
                                               "returns the first outcome and changes nothing"}],
                "requestBody": {"required": True, "content": {"application/json": {
                    "schema": {"$ref": "#/components/schemas/CorrectionRequest"}}}},
                "responses": {
                    "200": {"description": "The correction, the new model version and the item's new decision",
                            "content": {"application/json": {
                                "schema": {"$ref": "#/components/schemas/CorrectionResult"}}}},
                    "400": _answer("The body is not JSON, or the Host header is not one this service answers to"),
                    "401": _answer("No or wrong bearer token"),
                    "403": _answer("A cross-origin request (Origin or Sec-Fetch-Site), refused"),
                    "404": _answer("No stored item has this id"),
                    "409": _answer("No model trained yet, or a correction of this item is still pending"),
                    "413": _answer("The body is over the limit"),
                    "422": _answer("A missing or empty value, an unknown queue without new_queue, or a queue "
                                   "name that cannot be a new queue"),
                    "415": _answer("The body is not sent as application/json"),
                    "503": _answer("Not done: the time limit passed before the work started, or the store is "
                                   "locked; Retry-After says when to try again"),
                    "507": _answer("Not done: the workspace's disk is full"),
                },
            }
        },
        "/v1/health": {
            "get": {
                "summary": "Liveness and the active model version (no token needed)",
                "operationId": "health",
                "security": [],
                "responses": {
                    "200": {"description": "The service is up (status ok or degraded)", "content": {
                        "application/json": {"schema": {"$ref": "#/components/schemas/Health"}}}},
                    "400": _answer("The Host header is not one this service answers to"),
                    "403": _answer("A cross-origin request, refused"),
                },
            }
        },
        "/v1/model": {
            "get": {
                "summary": "The active model and its routing policy",
                "operationId": "model",
                "responses": {
                    "200": {"description": "The active model", "content": {"application/json": {
                        "schema": {"$ref": "#/components/schemas/ModelInfo"}}}},
                    "400": _answer("The Host header is not one this service answers to"),
                    "401": _answer("No or wrong bearer token"),
                    "403": _answer("A cross-origin request, refused"),
                    "409": _answer("No model trained yet"),
                },
            }
        },
        "/metrics": {
            "get": {
                "summary": "Counters since the service started, in the Prometheus text exposition format: items "
                           "routed and held per queue, corrections, store errors, the active model version, "
                           "request latency histograms per endpoint",
                "operationId": "metrics",
                "responses": {
                    "200": {"description": "The exposition (text format 0.0.4)",
                            "content": {"text/plain": {"schema": {"type": "string"}}}},
                    "400": _answer("The Host header is not one this service answers to"),
                    "401": _answer("No or wrong bearer token"),
                    "403": _answer("A cross-origin request, refused"),
                },
            }
        },
        "/openapi.json": {
            "get": {
                "summary": "This document",
                "operationId": "openapi",
                "security": [],
                "responses": {"200": {"description": "The OpenAPI document",
                                      "content": {"application/json": {"schema": {"type": "object"}}}}},
            }
        },
    },
    "components": {
        "securitySchemes": {"bearer": {"type": "http", "scheme": "bearer"}},
        "schemas": {
            "Error": {
                "type": "object", "required": ["error", "field"], "additionalProperties": False,
                "properties": {
                    "error": {"type": "string", "description": "What is wrong and what to do"},
                    "field": {"type": ["string", "null"],
                              "description": "Where: a key path such as items[3].fields.tenure_days"},
                },
            },
            "FieldValue": {"type": ["string", "number", "null"]},
            "Item": {
                "type": "object", "required": ["id", "fields"], "additionalProperties": False,
                "properties": {
                    "id": {"type": ["string", "integer"], "minLength": 1, "maxLength": MAX_ID_CHARS},
                    "fields": {
                        "type": "object", "additionalProperties": False,
                        "description": "Field name -> value. A field left out, or null, is treated as missing. "
                                       "Text fields take text, category fields one value, number fields a "
                                       "number (or a string holding one).",
                        "properties": {},
                    },
                    "arrived_at": {"type": ["string", "null"], "format": "date-time"},
                },
            },
            "ItemBatch": {
                "type": "object", "required": ["items"], "additionalProperties": False,
                "properties": {"items": {"type": "array", "minItems": 1, "maxItems": 1000,
                                         "items": {"$ref": "#/components/schemas/Item"},
                                         "description": "Ids must differ within a batch"}},
            },
            "Evidence": {
                "type": "object", "required": ["feature", "weight", "kind"],
                "properties": {
                    "feature": {"type": "string"},
                    "weight": {"type": "number",
                               "description": "Log-likelihood-ratio for the suggested queue over the runner-up"},
                    "kind": {"type": "string", "enum": ["prior", "token", "field", "absent", "layer"],
                             "description": "prior, token, field or absent (a word the item lacks; Bernoulli)"},
                },
            },
            "Decision": {
                "type": "object",
                "required": ["id", "queue", "suggested", "confidence", "held", "reason", "runner_up",
                             "evidence", "model_version"],
                "properties": {
                    "id": {"type": "string"},
                    "queue": {"type": ["string", "null"], "description": "null when held for review"},
                    "suggested": {"type": "string", "description": "The most likely queue"},
                    "confidence": {"type": "number", "minimum": 0, "maximum": 1},
                    "held": {"type": "boolean"},
                    "reason": {"type": "string"},
                    "runner_up": {"type": ["string", "null"]},
                    "runner_up_confidence": {"type": "number", "minimum": 0, "maximum": 1},
                    "held_by": {"type": ["string", "null"], "enum": ["never_auto", "watch_word",
                                "watch_probability", "no_cutoff", "below_cutoff", "new_queue", None],
                                "description": "why it is held; null when routed"},
                    "flag": {"type": ["string", "null"], "enum": ["never_auto", "watch", None],
                             "description": "never_auto or watch: a person must see it (from held_by)"},
                    "watch": {"type": "array", "items": {"type": "string"},
                              "description": "the watch-word hits or never-auto queues behind a watch hold"},
                    "evidence": {"type": "array", "items": {"$ref": "#/components/schemas/Evidence"}},
                    "unseen_words": {"type": "array", "items": {"type": "string"}},
                    "model_version": {"type": "integer"},
                },
            },
            "RouteOne": {
                "type": "object", "required": ["decision"],
                "properties": {"decision": {"$ref": "#/components/schemas/Decision"}},
            },
            "RouteMany": {
                "type": "object", "required": ["decisions"],
                "properties": {"decisions": {"type": "array",
                                             "items": {"$ref": "#/components/schemas/Decision"}}},
            },
            "CorrectionRequest": {
                "type": "object", "required": ["item_id", "queue"], "additionalProperties": False,
                "properties": {
                    "item_id": {"type": "string", "minLength": 1, "maxLength": MAX_ID_CHARS},
                    "queue": {"type": "string", "minLength": 1, "maxLength": MAX_NAME_CHARS,
                              "description": "A known queue, or a new one (letters, digits, '_' or '-')"},
                    "by": {"type": ["string", "null"], "maxLength": MAX_BY_CHARS,
                           "description": "Who corrected it"},
                    "new_queue": {"type": "boolean", "default": False,
                                  "description": "true to allow creating the queue when no item has it yet"},
                },
            },
            "CorrectionResult": {
                "type": "object",
                "required": ["correction_id", "item_id", "before", "after", "by", "at", "model_version",
                             "decision"],
                "properties": {
                    "correction_id": {"type": "integer"},
                    "item_id": {"type": "string"},
                    "before": {"type": ["string", "null"], "description": "The item's queue before"},
                    "after": {"type": "string"},
                    "by": {"type": "string"},
                    "at": {"type": "string", "format": "date-time"},
                    "model_version": {"type": "integer", "description": "The version that learned it"},
                    "decision": {"$ref": "#/components/schemas/Decision"},
                },
            },
            "Health": {
                "type": "object", "required": ["ok", "status", "model_version", "problems"],
                "properties": {
                    "ok": {"type": "boolean", "description": "false when degraded"},
                    "status": {"type": "string", "enum": ["ok", "degraded"]},
                    "model_version": {"type": ["integer", "null"],
                                      "description": "The version being served"},
                    "problems": {"type": "array", "items": {"type": "string"},
                                 "description": "Why the service is degraded (disk full, a model that "
                                                "cannot be loaded, ...)"},
                },
            },
            "ModelInfo": {
                "type": "object",
                "required": ["model_version", "text_model", "queues", "cutoffs", "never_auto",
                             "watch_probability", "temperature", "fields"],
                "properties": {
                    "model_version": {"type": "integer"},
                    "kind": {"type": "string"},
                    "created_at": {"type": "string"},
                    "text_model": {"type": "string"},
                    "queues": {"type": "array", "items": {"type": "string"}},
                    "cutoffs": {"type": "object", "additionalProperties": {"type": ["number", "null"]},
                                "description": "Confidence needed to auto-route; null: every item is held"},
                    "never_auto": {"type": "array", "items": {"type": "string"}},
                    "watch_probability": {"type": "number"},
                    "temperature": {"type": "number"},
                    "fields": {"type": "array", "items": {
                        "type": "object", "required": ["name", "role"],
                        "properties": {"name": {"type": "string"}, "role": {"type": "string"}}}},
                },
            },
        },
    },
}


def openapi_document(schema: Schema | None = None, *, max_batch: int = 1000) -> dict[str, Any]:
    """`OPENAPI` with this workspace's field names and value types (and batch limit) filled in."""
    doc = copy.deepcopy(OPENAPI)
    schemas = doc["components"]["schemas"]
    schemas["ItemBatch"]["properties"]["items"]["maxItems"] = max_batch
    if schema is not None:
        types = {"text": ["string", "number", "null"], "category": ["string", "number", "null"],
                 "number": ["number", "string", "null"]}
        schemas["Item"]["properties"]["fields"]["properties"] = {
            f.name: {"type": types.get(f.role.value, ["string", "number", "null"]),
                     "description": f"{f.role.value} field"} for f in schema.fields}
    return doc

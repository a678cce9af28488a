"""The application layer: every front end (CLI, HTTP service, terminal UI) goes through it.

`Workspace` is the facade; the use cases live one per module (training, routing, corrections, versions,
review, tuning, demo); errors are typed (`triage.app.errors`), results are typed records (`triage.app.decisions`).

Front ends import from here (and `triage.config`, `triage.records`) only, so the names they need from the
layers below are re-exported: the lower layers' user-facing errors (to map them at the edge), the readers of
a stream of items (stdin, an HTTP body), the config inference and the types they render.
"""

from triage.app.decisions import CorrectionReport, ImportReport, RoutingDecision, TrainReport
from triage.app.errors import (
    AlreadyInQueue,
    BadInput,
    Cancelled,
    Conflict,
    NoModel,
    UnknownItem,
    UnknownQueue,
    WorkspaceError,
)
from triage.app.measuring import Progress
from triage.app.routing import first_of_each_id, records_from_dicts
from triage.app.workspace import CONFIG_NAME, DB_NAME, Workspace
from triage.config import ConfigError
from triage.core.counts import CountError
from triage.core.encode import MissingFieldError
from triage.core.measure import Measurement
from triage.core.metrics import Scorecard
from triage.core.model import ModelSpec
from triage.core.routing import HeldBy
from triage.core.schema import Schema
from triage.infer import infer_config
from triage.ingest import IngestError, Reject, describe_reject, read_jsonl_stream
from triage.store import StoreBusyError, StoreError, StoreFullError
from triage.store.artifacts import ArtifactError

__all__ = ["StoreBusyError", "StoreFullError", "Workspace", "WorkspaceError", "NoModel", "UnknownItem", "UnknownQueue", "Conflict", "AlreadyInQueue", "BadInput",
           "Cancelled", "ConfigError", "Measurement", "TrainReport", "ImportReport", "CorrectionReport",
           "RoutingDecision", "HeldBy", "records_from_dicts", "Progress", "CONFIG_NAME", "DB_NAME",
           "CountError", "MissingFieldError", "IngestError", "StoreError", "ArtifactError", "USER_ERRORS",
           "Reject", "describe_reject", "first_of_each_id", "read_jsonl_stream", "infer_config", "Scorecard", "ModelSpec", "Schema"]

# every error a user can cause and fix: front ends show its message (the CLI exits 2); anything else is a bug
USER_ERRORS: tuple[type[Exception], ...] = (WorkspaceError, ConfigError, IngestError, StoreError, ArtifactError,
                                            CountError, MissingFieldError)

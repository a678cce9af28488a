"""The application layer: every front end (CLI, HTTP service, terminal UI) goes through it.

`Workspace` is the facade; the use cases live one per module (training, routing, corrections, versions,
review, tuning); errors are typed (`triage.app.errors`), results are typed records (`triage.app.decisions`).
"""

from triage.app.decisions import CorrectionReport, ImportReport, TrainReport
from triage.app.errors import (
    BadInput,
    Cancelled,
    Conflict,
    NoModel,
    UnknownItem,
    UnknownQueue,
    WorkspaceError,
)
from triage.app.routing import records_from_dicts
from triage.app.training import Progress
from triage.app.workspace import CONFIG_NAME, DB_NAME, Workspace
from triage.config import ConfigError
from triage.core.measure import Measurement

__all__ = ["Workspace", "WorkspaceError", "NoModel", "UnknownItem", "UnknownQueue", "Conflict", "BadInput",
           "Cancelled", "ConfigError", "Measurement", "TrainReport", "ImportReport", "CorrectionReport",
           "records_from_dicts", "Progress", "CONFIG_NAME", "DB_NAME"]

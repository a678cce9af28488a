"""Moved: the application layer is the `triage.app` package. This name stays for a while so that code
written against it keeps importing; new code imports `triage.app`."""

from triage.app import *  # noqa: F403
from triage.app import __all__  # noqa: F401
from triage.app.model_settings import fingerprint, spec_from_config  # noqa: F401

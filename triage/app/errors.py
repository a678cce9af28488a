"""Typed errors of the application layer: front ends map each type to an exit code, an HTTP status or a notice.

Every one is a `WorkspaceError` (the name front ends and scripts have always caught), so a front end that does not
care which problem it was keeps working; one that does maps the subclass.
"""

from __future__ import annotations


class WorkspaceError(Exception):
    """A user-facing problem: the message says what is wrong and what to do."""


class NoModel(WorkspaceError):
    """The workspace has no trained model yet (run `triage train`)."""


class UnknownItem(WorkspaceError):
    """No stored item has the id asked for."""


class UnknownQueue(WorkspaceError):
    """A queue named by the user is not one the model or the labelled items know."""


class Conflict(WorkspaceError):
    """The request clashes with the stored state (another process moved the model, an id stored otherwise)."""


class AlreadyInQueue(Conflict):
    """A correction to the queue the item already has: nothing would change, so nothing is recorded (a second
    look at an item another person or process decided meanwhile must not add a version "X -> X")."""


class BadInput(WorkspaceError):
    """A value given by the user is out of range or malformed."""


class Cancelled(WorkspaceError):
    """A long run was cancelled by the user; nothing was changed."""


__all__ = ["WorkspaceError", "NoModel", "UnknownItem", "UnknownQueue", "Conflict", "AlreadyInQueue", "BadInput", "Cancelled"]

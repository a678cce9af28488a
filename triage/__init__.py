"""triage: route tickets and leads into queues."""

__version__ = "0.1.0"

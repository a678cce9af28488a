"""The terminal UI: a Textual front end over the Workspace (it never talks to the store's SQL or to numpy models
except to read what the Workspace hands back)."""

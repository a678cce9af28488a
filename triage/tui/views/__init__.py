"""The six views of the terminal UI, one module each. Each takes the Workspace as an attribute and posts
messages up.

Views read through the Workspace (and its store's read methods); they read model objects it returns but never
change them: every change goes through Workspace.train / activate / correct / undo.
"""

from triage.tui.views.base import View
from triage.tui.views.detail import ItemDetail
from triage.tui.views.fields import PAIR_ROWS, FieldsView, is_word, merge_table
from triage.tui.views.incoming import IncomingView, Row
from triage.tui.views.models import ModelsView, grid_cells, same_setting
from triage.tui.views.overview import OverviewView
from triage.tui.views.review import ReviewView
from triage.tui.views.scorecard import ScorecardView, cutoff_text

__all__ = ["PAIR_ROWS", "FieldsView", "IncomingView", "ItemDetail", "ModelsView", "OverviewView", "ReviewView",
           "Row", "ScorecardView", "View", "cutoff_text", "grid_cells", "is_word", "merge_table",
           "same_setting"]

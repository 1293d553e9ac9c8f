"""holdfast.ui.widgets: widgets of the inspector."""

from holdfast.ui.widgets.columns import ColumnSpec, default_columns
from holdfast.ui.widgets.row_model import RowModel, sort_order
from holdfast.ui.widgets.row_table import RowTable

__all__ = ["ColumnSpec", "RowModel", "RowTable", "default_columns", "sort_order"]

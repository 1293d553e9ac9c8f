"""holdfast.ui.widgets: widgets of the inspector."""

from holdfast.ui.widgets.row_table import ColumnSpec, RowTable, default_columns, sort_order

__all__ = ["ColumnSpec", "RowTable", "default_columns", "sort_order"]

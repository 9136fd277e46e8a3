"""Reports of a week review: field-crew work orders as HTML pages and a safe CSV.

Qt-free: the PDF of the sheets is printed by :func:`calibra.gui.qt_pdf.sheets_to_pdf`.
"""

from calibra.reports.checklist import FINDING_LABELS, checklist_items
from calibra.reports.html import (
    work_order_html,
    work_order_pages,
    work_order_sheet,
    work_order_sheets,
)
from calibra.reports.model_sheet import (
    MODEL_WORK_ORDER_COLUMNS,
    model_sheet,
    needing_model_work,
    write_model_work_orders_csv,
)
from calibra.reports.paths import (
    inside,
    safe_file_stem,
    unique_file_names,
    write_work_orders_html,
)
from calibra.reports.rtu_sheet import (
    RTU_WORK_ORDER_COLUMNS,
    rtu_sheet,
    rtu_work_order_rows,
    write_rtu_work_orders_csv,
)
from calibra.reports.safety import SAFETY_CAUTIONS, Caution
from calibra.reports.sheet_pages import DeviceSection, Sheet
from calibra.reports.spreadsheet import spreadsheet_cell, write_safe_csv
from calibra.reports.work_orders import (
    WORK_ORDER_COLUMNS,
    CheckGroup,
    check_groups,
    needing_field_work,
    needing_rtu_work,
    work_order_rows,
    write_work_orders_csv,
)

__all__ = [
    "FINDING_LABELS", "MODEL_WORK_ORDER_COLUMNS", "RTU_WORK_ORDER_COLUMNS", "SAFETY_CAUTIONS",
    "WORK_ORDER_COLUMNS",
    "Caution", "CheckGroup", "DeviceSection", "Sheet", "work_order_sheet", "work_order_sheets",
    "check_groups", "checklist_items", "inside", "model_sheet", "needing_field_work",
    "needing_model_work", "needing_rtu_work", "write_model_work_orders_csv",
    "rtu_sheet", "rtu_work_order_rows", "write_rtu_work_orders_csv", "safe_file_stem",
    "spreadsheet_cell", "unique_file_names", "work_order_html", "work_order_pages",
    "work_order_rows", "write_safe_csv", "write_work_orders_csv", "write_work_orders_html",
]

"""The shot sheet PDF: ``content`` chooses what goes on the pages (no Qt), ``kit``, ``cover`` and
``shot_panel`` paint it, ``document`` writes the file."""

from app.sheet.content import SheetReport, parse_statuses
from app.sheet.document import make_sheet

__all__ = ["SheetReport", "make_sheet", "parse_statuses"]

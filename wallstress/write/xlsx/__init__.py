"""Workbooks: our sheets spliced into a copy of the user's package, or a new workbook."""

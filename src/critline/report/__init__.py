"""Reports of a batch: the ``critline.batch/1`` JSON, a CSV table, a self-contained HTML page."""

from critline.report.document import SCHEMA, batch_document
from critline.report.html import batch_html
from critline.report.table import batch_csv
from critline.report.write import write_reports

__all__ = ["SCHEMA", "batch_csv", "batch_document", "batch_html", "write_reports"]

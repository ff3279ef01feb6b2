"""Batch screening around :mod:`dynamics.screening`: the front door to its pieces.

- :mod:`service.batch`: reading batch files (JSON lines, CSV), shared by CLI and API;
- :mod:`service.files`: atomic writes and the CLI's per-orbit result folder;
- :mod:`service.screening_report`: the JSON summary, CSV table, readable report, progress bar;
- :mod:`service.job_kinds.screening`: screenings submitted through ``POST /v1/screenings``,
  run by the one job runner like every other kind of job.
"""

from dynamics.forecast import CAUTIONS

from .batch import CSV_COLUMNS, BatchRow, read_batch, row_from_mapping
from .files import ResultDir, write_atomic
from .job_kinds.screening import canonical_screening_request, screening_inputs
from .screening_report import (
    TABLE_COLUMNS,
    ProgressBar,
    assemble,
    invalid_record,
    report_text,
    table_csv,
)

SCREENING_CAUTIONS = CAUTIONS

__all__ = [
    "CSV_COLUMNS",
    "SCREENING_CAUTIONS",
    "TABLE_COLUMNS",
    "BatchRow",
    "ProgressBar",
    "ResultDir",
    "assemble",
    "canonical_screening_request",
    "invalid_record",
    "read_batch",
    "report_text",
    "row_from_mapping",
    "screening_inputs",
    "table_csv",
    "write_atomic",
]

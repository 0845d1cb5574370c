"""The outputs of a run: the reserve workbook, the loan-level files and the run record.

Implements
----------
neutralise_text, neutralise_frame   text safety for CSV and XLSX (OWASP CSV injection)
CAUTION                             the caution shown on the workbook (the README quotes it)
RunReport                           everything the outputs are written from
run_record                          the run record (``run.json``)
write_workbook                      ``reserve.xlsx``
write_summary_workbook              ``summary.xlsx``: the printed sheets, standing alone
write_outputs                       the whole output folder, written safely (swapped into place)
check_output_path                   refuse an output folder that would replace an input
write_table_csv                     one table to one CSV file (a loan's schedule)
clock                               the run's timestamps (SOURCE_DATE_EPOCH honoured)
OUTPUT_FILES, SHEETS                the files and sheet names
"""

from allowance.report.files import (
    OUTPUT_FILES, OutputPaths, check_output_path, write_movement, write_outputs, write_table_csv,
)
from allowance.report.record import CAUTION, RunReport, money_total, run_record
from allowance.text import FORMULA_PREFIXES, neutralise_frame, neutralise_text
from allowance.report.workbook import SHEETS, write_summary_workbook, write_workbook

__all__ = [
    "CAUTION", "FORMULA_PREFIXES", "OUTPUT_FILES", "SHEETS", "OutputPaths", "RunReport", "check_output_path",
    "money_total", "neutralise_frame", "neutralise_text", "run_record", "write_movement", "write_outputs",
    "write_summary_workbook", "write_table_csv", "write_workbook",
]

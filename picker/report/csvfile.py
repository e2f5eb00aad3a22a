"""CSV as other tools read it: one convention for every CSV picker writes.

* Line ends are CRLF, as RFC 4180 (section 2, rule 1) asks.
* Numbers are numbers: floats as ``repr`` (they read back bit for bit), the
  unit in the column name (``C1_F``, ``f_nominal_Hz``), never a display string
  with a prefix beside them.
* Files start with a UTF-8 byte-order mark (:data:`BOM`), so a spreadsheet
  reads "µH" and "±" (common practice, no source); standard output does not,
  so a pipe gets plain UTF-8.
* Text cells that a spreadsheet would run as a formula are guarded by
  :func:`picker.files.csv_safe`.
"""

from __future__ import annotations

import csv
import io
import math
from collections.abc import Sequence

from picker.files import csv_safe

__all__ = ["BOM", "CSV_LINE_END", "csv_text"]

#: Line end of every CSV picker writes: CRLF, as RFC 4180 (section 2, rule 1) asks.
CSV_LINE_END = "\r\n"

#: Byte-order mark put before CSV written to a file, so a spreadsheet reads it as
#: UTF-8 ("µH", "±" readable; common practice, no source).
BOM = "\ufeff"


def csv_text(header: Sequence[str], rows: Sequence[Sequence[object]]) -> str:
    """CSV text with CRLF line ends (RFC 4180): floats as ``repr`` (round-trip exact),
    booleans as ``true``/``false``, None as an empty cell, text guarded by
    :func:`picker.files.csv_safe`."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator=CSV_LINE_END)
    w.writerow(header)
    for row in rows:
        w.writerow([_csv_cell(v) for v in row])
    return buf.getvalue()


def _csv_cell(v: object) -> str:
    if v is None:
        return ""
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float):
        return repr(v) if math.isfinite(v) else ""
    if isinstance(v, int):
        return str(v)
    return csv_safe(str(v))

"""The .csv drive format: a header row, then ``time_s`` and one column per quantity.

Columns ``acceleration_g`` and optionally ``velocity_m_s``, ``displacement_m``;
time with 9 decimals, values with 9 significant digits.  ``scale`` is 1.

References
----------
RFC 4180 (CSV).
"""

from __future__ import annotations

import itertools
import math
from pathlib import Path
from typing import Iterator

import numpy as np

from vibsynth.errors import InputError
from vibsynth.io.quantities import COLUMN_NAMES

#: Sample formats; the first is the default.
SUBTYPES = ("text",)

TIME_FORMAT = "%.9f"
VALUE_FORMAT = "%.9g"
#: Longest text of one value written with VALUE_FORMAT: sign, 9 digits, point, "e-" and 3 exponent digits.
VALUE_MAX_CHARS = 16
#: Accepted names of the time column.
TIME_NAMES = ("time_s", "time", "t", "time (s)")


def estimate_bytes(samples: int, quantities, rate_hz: float) -> tuple[int, bool]:
    """Upper bound of a .csv drive's size: the widest row the format strings can give.

    Examples
    --------
    >>> estimate_bytes(10, ("acceleration",), 100.0)[1]
    False

    References
    ----------
    C printf conversions ``%.9f`` and ``%.9g`` (ISO C 7.21.6.1).
    """
    count = int(samples)
    quantities = tuple(quantities)
    rate = float(rate_hz)
    # the time column is known: 9 decimals, a point, and one more integer digit from each power of ten on
    # (counted from a nanosecond early, so rounding up to the next power never makes the bound short)
    time_chars = count * len(TIME_FORMAT % 0.0)
    power = 10.0
    while count and (count - 1) / rate >= power - 1e-9:
        first = max(0, math.floor((power - 1e-9) * rate))
        time_chars += count - first
        power *= 10.0
    header = len("time_s") + sum(1 + len(COLUMN_NAMES.get(q, q)) for q in quantities) + 1
    return header + time_chars + count * (len(quantities) * (1 + VALUE_MAX_CHARS) + 1), False


class CsvWriter:
    """Write rows ``time_s, values...`` to a .csv file.

    Examples
    --------
    >>> import tempfile, pathlib, numpy as np
    >>> path = pathlib.Path(tempfile.mkdtemp()) / "x.csv"
    >>> writer = CsvWriter(path, str(path), ("acceleration",), 10.0)
    >>> writer.write(np.array([[0.5]]), 0); writer.close(); writer.finish()
    >>> path.read_text()
    'time_s,acceleration_g\\n0.000000000,0.5\\n'

    References
    ----------
    RFC 4180.
    """

    def __init__(self, temporary: Path, where: str, quantities, rate_hz: float, column_names=None):
        self.rate_hz = float(rate_hz)
        self._handle = open(temporary, "w", encoding="ascii", newline="")
        data_names = list(column_names) if column_names else [COLUMN_NAMES[q] for q in quantities]
        names = ["time_s"] + data_names
        self._handle.write(",".join(names) + "\n")
        self._row = ",".join([TIME_FORMAT] + [VALUE_FORMAT] * len(data_names)) + "\n"

    def write(self, values: np.ndarray, written: int) -> None:
        """Append rows of physical values, shape (m, q); ``written`` rows came before (sets the time)."""
        count = values.shape[0]
        times = (np.arange(written, written + count) / self.rate_hz)[:, None]
        table = np.hstack([times, values])
        self._handle.write((self._row * count) % tuple(table.ravel().tolist()))

    def close(self) -> None:
        """Close the file (idempotent)."""
        if self._handle is not None:
            handle, self._handle = self._handle, None
            handle.close()

    def finish(self) -> None:
        """Nothing to do after closing."""


def read_header(path: Path) -> tuple[list, int]:
    """Column names of the header and the number of data rows (blank and ``#`` lines skipped).

    Examples
    --------
    >>> import tempfile, pathlib
    >>> path = pathlib.Path(tempfile.mkdtemp()) / "x.csv"
    >>> _ = path.write_text("time_s,acceleration_g\\n0,1\\n0.1,2\\n")
    >>> read_header(path)
    (['time_s', 'acceleration_g'], 2)

    References
    ----------
    RFC 4180.
    """
    where = str(path)
    header = ""
    count = 0
    try:
        with open(path, "r", encoding="utf-8", newline="") as handle:
            for line in handle:
                if not line.strip() or line.lstrip().startswith("#"):
                    continue
                if not header:
                    header = line
                else:
                    count += 1
    except UnicodeDecodeError as error:
        raise InputError(f"is not a text table (byte {error.start} of a line is not UTF-8)", where) from None
    names = [cell.strip() for cell in header.strip().split(",")]
    if len(names) < 2 or names[0].lower() not in TIME_NAMES:
        raise InputError(f"header {header.strip()!r} must start with time_s and an acceleration column (g)", where,
                         "row 1")
    return names, count


def iter_chunks(path: Path, width: int, column: int | None, chunk: int, start: int, stop: int, samples: int,
                rate_hz: float, scale: float) -> Iterator[np.ndarray]:
    """Values of data column ``column`` (0: acceleration; None: every data column), rows ``[start, stop)``, checking the time column.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> path = pathlib.Path(tempfile.mkdtemp()) / "x.csv"
    >>> _ = path.write_text("time_s,acceleration_g\\n0,1\\n0.1,2\\n")
    >>> [c.tolist() for c in iter_chunks(path, 2, 0, 5, 0, 2, 2, 10.0, 1.0)]
    [[1.0, 2.0]]

    References
    ----------
    RFC 4180.
    """
    try:
        yield from _iter_rows(path, width, column, chunk, start, stop, samples, rate_hz, scale)
    except UnicodeDecodeError as error:
        raise InputError(f"is not a text table (byte {error.start} of a line is not UTF-8)", str(path)) from None


def _iter_rows(path, width, column, chunk, start, stop, samples, rate_hz, scale):
    tolerance = 0.1 / rate_hz
    with open(path, "r", encoding="utf-8", newline="") as handle:
        lines = (line for line in handle if line.strip() and not line.lstrip().startswith("#"))
        next(lines, None)  # header
        for _ in itertools.islice(lines, start):
            pass
        position = start
        while position < stop:
            count = min(chunk, stop - position)
            block = list(itertools.islice(lines, count))
            if len(block) != count:
                raise InputError(f"ends after {position + len(block)} rows, expected {samples}", str(path))
            try:
                table = np.loadtxt(block, delimiter=",", ndmin=2, dtype=np.float64)
            except ValueError:
                bad = _first_bad_row(block, width)
                raise InputError(_bad_csv_row(block, width), str(path), f"row {position + bad + 2}") from None
            if table.shape[1] != width:
                raise InputError(
                    f"rows {position + 2}-{position + count + 1} have {table.shape[1]} columns, the header {width}",
                    str(path),
                )
            expected = np.arange(position, position + count) / rate_hz
            off = np.abs(table[:, 0] - expected) > tolerance
            if np.any(off):
                row = int(np.flatnonzero(off)[0])
                raise InputError(
                    f"row {position + row + 2}: time {table[row, 0]:.9g} s does not match sample "
                    f"{position + row} at {rate_hz:g} Hz ({expected[row]:.9g} s); the rate disagrees with the file",
                    str(path),
                )
            position += count
            yield (table[:, 1:] if column is None else table[:, 1 + column]) * scale


def _first_bad_row(block: list, width: int) -> int:
    for index, line in enumerate(block):
        cells = line.strip().split(",")
        try:
            [float(cell) for cell in cells]
        except ValueError:
            return index
        if len(cells) != width:
            return index
    return 0


def _bad_csv_row(block: list, width: int) -> str:
    line = block[_first_bad_row(block, width)].strip()
    cells = line.split(",")
    if len(cells) != width:
        return f"has {len(cells)} values where the header has {width} columns: {line[:60]!r}"
    return f"{line[:60]!r} is not a row of {width} numbers separated by commas"

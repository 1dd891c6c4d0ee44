"""The .npy drive format: float64 values in their physical units, shape (n,) or (n, columns).

Acceleration alone is shape (n,); with velocity/displacement columns the
array is (n, q), its columns named in the sidecar's ``columns`` (no time
column).  ``scale`` is 1.

References
----------
NumPy ``.npy`` format (NEP 1).
"""

from __future__ import annotations

import io
from pathlib import Path
from typing import Iterator

import numpy as np

from vibsynth.errors import InputError

#: Sample formats; the first is the default.
SUBTYPES = ("float64",)


def estimate_bytes(samples: int, columns: int) -> tuple[int, bool]:
    """Exact size of a .npy drive: the NEP 1 header plus 8 bytes per value.

    Examples
    --------
    >>> estimate_bytes(10, 1)
    (208, True)

    References
    ----------
    NumPy NEP 1 (.npy format, version 1.0 header).
    """
    count = int(samples)
    buffer = io.BytesIO()
    shape = (count,) if columns == 1 else (count, columns)
    np.lib.format.write_array_header_1_0(buffer, {"descr": "<f8", "fortran_order": False, "shape": shape})
    return buffer.tell() + 8 * count * columns, True


class NpyWriter:
    """Write float64 rows to a .npy file whose header announces ``samples`` rows.

    Examples
    --------
    >>> import tempfile, pathlib, numpy as np
    >>> path = pathlib.Path(tempfile.mkdtemp()) / "x.npy"
    >>> writer = NpyWriter(path, str(path), 2, 1)
    >>> writer.write(np.array([[1.0], [2.0]]), 0); writer.close(); writer.finish()
    >>> np.load(path, allow_pickle=False).tolist()
    [1.0, 2.0]

    References
    ----------
    NumPy NEP 1.
    """

    def __init__(self, temporary: Path, where: str, samples: int, columns: int):
        self.columns = int(columns)
        self._handle = open(temporary, "wb")
        shape = (int(samples),) if self.columns == 1 else (int(samples), self.columns)
        header = {"descr": np.lib.format.dtype_to_descr(np.dtype("<f8")), "fortran_order": False, "shape": shape}
        np.lib.format.write_array_header_1_0(self._handle, header)

    def write(self, values: np.ndarray, written: int) -> None:
        """Append rows of physical values, shape (m, columns)."""
        self._handle.write(memoryview(np.ascontiguousarray(values if self.columns > 1 else values[:, 0], dtype="<f8")))

    def close(self) -> None:
        """Close the file (idempotent)."""
        if self._handle is not None:
            handle, self._handle = self._handle, None
            handle.close()

    def finish(self) -> None:
        """Nothing to do after closing."""


def read_header(path: Path) -> tuple[int, int, str, int]:
    """Rows, columns, dtype string and data offset of a drive .npy file (refusing other layouts).

    Examples
    --------
    >>> import tempfile, pathlib, numpy as np
    >>> path = pathlib.Path(tempfile.mkdtemp()) / "x.npy"
    >>> np.save(path, np.zeros((5, 2)))
    >>> read_header(path)
    (5, 2, '<f8', 128)

    References
    ----------
    NumPy NEP 1 (header versions 1.0 and 2.0).
    """
    where = str(path)
    with open(path, "rb") as handle:
        try:
            version = np.lib.format.read_magic(handle)
            reader = np.lib.format.read_array_header_1_0 if version == (1, 0) else np.lib.format.read_array_header_2_0
            shape, fortran, numpy_dtype = reader(handle)
        except ValueError as error:
            raise InputError(f"is not a readable .npy file ({error})", where) from None
        offset = handle.tell()
    if fortran or numpy_dtype.kind != "f" or len(shape) not in (1, 2):
        raise InputError(
            f"holds {numpy_dtype} of shape {shape}{' in Fortran order' if fortran else ''}; "
            "a drive .npy holds floats of shape (n,) or (n, columns) in C order",
            where,
        )
    return int(shape[0]), (1 if len(shape) == 1 else int(shape[1])), numpy_dtype.str, offset


def iter_chunks(path: Path, offset: int, dtype: str, width: int, column: int | None, chunk: int, start: int, stop: int,
                samples: int, scale: float) -> Iterator[np.ndarray]:
    """Values of one column (None: all, shape (m, width)), rows ``[start, stop)``, in chunks (float64), in constant memory.

    Examples
    --------
    >>> import tempfile, pathlib, numpy as np
    >>> path = pathlib.Path(tempfile.mkdtemp()) / "x.npy"
    >>> np.save(path, np.arange(4.0))
    >>> [c.tolist() for c in iter_chunks(path, 128, "<f8", 1, 0, 3, 0, 4, 4, 1.0)]
    [[0.0, 1.0, 2.0], [3.0]]

    References
    ----------
    NumPy NEP 1.
    """
    numpy_dtype = np.dtype(dtype)
    with open(path, "rb") as handle:
        handle.seek(offset + start * width * numpy_dtype.itemsize)
        position = start
        while position < stop:
            count = min(chunk, stop - position)
            data = np.fromfile(handle, dtype=numpy_dtype, count=count * width)
            if data.size != count * width:
                raise InputError(f"ends after about {position + data.size // width} samples, expected {samples}",
                                 str(path))
            position += count
            table = data.reshape(count, width)
            yield (table if column is None else table[:, column]).astype(np.float64) * scale

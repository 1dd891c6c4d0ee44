"""Files in and out: drive-file formats, the sidecar, atomic writing, the JSON Schemas.

Modules
-------
atomic      one atomic-write helper (temporary ``.NAME.PID.partial``, rename, stale clean-up) used by every writer
drivefile   the drive writer and chunked reader over the formats; request checks (format, size, disk space)
wavflac     .wav/.flac: normalised mono samples, exact scale, never clipped
csvtable    .csv: ``time_s`` and one column per quantity
npyarray    .npy: float64 values, shape (n,) or (n, q)
sidecar     the sidecar dataclass (build, validate, to/from JSON, schema version; reads the 0.1 layout)
quantities  the one units table (quantity -> unit, column name); no numpy
caution     the caution text that goes with every drive file
schemas     loads the JSON Schemas shipped in ``vibsynth/schemas``

Nothing here imports :mod:`vibsynth.generate` or :mod:`vibsynth.transforms`.
"""

"""Writing results to disk: the multi-state long format, atomic table writes and streamed runs.

Everything here is safe against half-written output. A single table is written to a temporary file
in the destination folder and moved into place (:func:`sim.io.atomic.write_atomic`); a whole run is
written into a temporary sibling folder that is renamed to the output folder only once every file is
complete. An existing destination is never touched unless ``force=True``.

Modules: :mod:`.long_format` (the multi-state long format of Putter, Fiocco & Geskus 2007),
:mod:`.tables` (one table as Parquet or CSV), :mod:`.run_writer` (streamed runs), :mod:`.metadata`
(a run's provenance), :mod:`.errors`.
"""

from .errors import ExportError
from .long_format import LONG_FORMAT_COLUMNS, long_format
from .metadata import TableHash, file_sha256, input_files, metadata_for
from .run_writer import RunWriter, write_run
from .tables import FORMATS, write_table, write_tidy_csv

__all__ = [
    "ExportError",
    "FORMATS",
    "LONG_FORMAT_COLUMNS",
    "long_format",
    "write_table",
    "write_tidy_csv",
    "RunWriter",
    "write_run",
    "metadata_for",
    "input_files",
    "file_sha256",
    "TableHash",
]

"""The one exception kinset raises for bad input.

Every message names where the problem is (file, and line or column when known), so a
technician can open the file and fix it without reading a traceback.
"""

from __future__ import annotations

from pathlib import Path


class InputError(ValueError):
    """Bad input: a file, a column, a cell or a key that kinset cannot use.

    Parameters
    ----------
    message : str
        What is wrong, in plain words.
    file : str or Path, optional
        The file it was found in.
    line : int, optional
        1-based line number in that file.
    column : str, optional
        Column name (CSV) or key path (YAML).
    """

    def __init__(self, message: str, file: str | Path | None = None,
                 line: int | None = None, column: str | None = None):
        self.message = message
        self.file = str(file) if file is not None else None
        self.line = line
        self.column = column
        super().__init__(str(self))

    def __str__(self) -> str:
        where = []
        if self.file:
            where.append(self.file)
        if self.line is not None:
            where.append(f"line {self.line}")
        if self.column is not None:
            where.append(f"column '{self.column}'")
        return (", ".join(where) + ": " if where else "") + self.message

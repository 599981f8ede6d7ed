"""Exception types of blendq.

Every problem with user input is an :class:`InputError` that names the file, the row and the
field; the command line turns it into one line and exit code 2. A physically impossible request
(for example a rate the well cannot give) is a :class:`ModelError`.
"""

from __future__ import annotations


class BlendqError(Exception):
    """Base class of all blendq errors."""


class InputError(BlendqError):
    """A problem with user input, located by file, row and field.

    Parameters
    ----------
    message : str
        What is wrong, with the value received and what was expected.
    file : str, optional
        File name (not the full path) the value came from.
    row : int, optional
        1-based data row in a table (the header is row 0), or ``None`` for a whole file.
    field : str, optional
        Column or key name.
    """

    def __init__(
        self,
        message: str,
        file: str | None = None,
        row: int | None = None,
        field: str | None = None,
    ) -> None:
        self.message = message
        self.file = file
        self.row = row
        self.field = field
        super().__init__(self.__str__())

    def __str__(self) -> str:
        where = []
        if self.file:
            where.append(self.file)
        if self.row is not None:
            where.append(f"row {self.row}")
        if self.field:
            where.append(f"{'column' if self.row is not None else 'field'} {self.field}")
        if not where:
            return self.message
        head = where[0] if len(where) == 1 else where[0] + " " + ", ".join(where[1:])
        return f"{head}: {self.message}"

    def located(
        self, file: str | None = None, row: int | None = None, field: str | None = None
    ) -> InputError:
        """Return a copy with missing location parts filled in."""
        return InputError(
            self.message,
            file=self.file or file,
            row=self.row if self.row is not None else row,
            field=self.field or field,
        )


class ModelError(BlendqError):
    """A physically impossible or ill-posed request to the well model."""

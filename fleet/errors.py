"""Input problems reported to the user all at once.

Core functions raise :class:`InputError` carrying every :class:`Problem` they
found, so that a user fixes a file in one pass rather than one error per run.
The command-line shell prints them and exits with status 2.
"""

from __future__ import annotations

from dataclasses import dataclass, field


@dataclass(frozen=True)
class Problem:
    """One thing wrong with a user's input.

    Parameters
    ----------
    file : str
        Path of the file as the user gave it.
    row : int or None
        Row as a spreadsheet shows it (the header is row 1, the first data row
        is row 2); None when the problem concerns the whole file or a column.
    column : str or None
        Column (or key) name; None when the problem concerns a whole row/file.
    message : str
        What is wrong and, where possible, what would be right.
    """

    file: str
    row: int | None
    column: str | None
    message: str

    def __str__(self) -> str:
        where = [self.file]
        if self.row is not None:
            where.append(f"row {self.row}")
        if self.column is not None:
            where.append(f"column '{self.column}'")
        return f"{', '.join(where)}: {self.message}"


@dataclass
class InputError(Exception):
    """Raised with every problem found in an input, not just the first."""

    problems: list[Problem] = field(default_factory=list)

    def __post_init__(self) -> None:
        super().__init__(str(self))

    def __str__(self) -> str:
        n = len(self.problems)
        head = f"{n} problem{'s' if n != 1 else ''} in the input"
        return head + ":\n" + "\n".join(f"  - {p}" for p in self.problems)

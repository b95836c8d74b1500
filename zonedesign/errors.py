"""Errors that carry a one-line, located message for the user.

`InputError` means bad input or usage (exit code 2). Its message names what is wrong and
where: the file, and the row id, column, key or line when there is one.
"""

from __future__ import annotations


class InputError(ValueError):
    """Bad input or usage; the CLI prints `str(err)` on one line and exits 2."""

    def __init__(self, message: str, *, where: str = "", problems: list[str] | None = None):
        self.where = where
        self.problems = list(problems or [])
        text = f"{where}: {message}" if where else message
        super().__init__(text)


class RulesError(InputError):
    """A rules file that cannot be used (syntax, unknown key, wrong type, range)."""


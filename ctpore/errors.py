"""Error types that the command line turns into exit status 2 with a one-line reason."""

from __future__ import annotations

__all__ = ["InputError"]


class InputError(ValueError):
    """Bad input from the user: a file, a value or a recipe that ctpore cannot use.

    The message names what was wrong (the file or parameter) and how to fix it. The command line
    prints it on one line and exits with status 2; nothing is written.

    Parameters
    ----------
    what : str
        What is wrong, naming the file or parameter.
    fix : str, optional
        What the user can do about it.
    """

    def __init__(self, what: str, fix: str | None = None):
        self.what = what
        self.fix = fix
        super().__init__(what if not fix else f"{what}. Fix: {fix}")

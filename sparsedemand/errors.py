"""The one exception type for bad input.

Every message is a single line that names the file, row, item or option at
fault; the CLI prints it and exits with code 2.
"""

from __future__ import annotations

__all__ = ["InputError"]


class InputError(ValueError):
    """Bad input: a file, column, row, item or option the user must fix."""

    def __init__(self, message: str) -> None:
        super().__init__(" ".join(str(message).split()))

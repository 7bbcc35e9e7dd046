"""The project's own error types and exit codes.

Every problem caused by the user's input (a file, a column name, an option) is
raised as :class:`InputError` with a one-line message that says what is wrong
and what to do. The command line prints that line and exits with status 2;
the window shows it in its message bar. Nothing else should reach the user.
"""

EXIT_OK = 0
EXIT_BAD_INPUT = 2
EXIT_CANCELLED = 130


class InputError(Exception):
    """A problem with the user's input, explained in one line.

    Parameters
    ----------
    message : str
        What is wrong and what to do about it, on one line.
    """

    def __init__(self, message: str):
        message = " ".join(str(message).split())  # always a single line
        super().__init__(message)
        self.message = message

    def __str__(self) -> str:
        return self.message

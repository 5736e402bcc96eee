"""Errors a user can act on; the command line prints them without a traceback."""


class UserError(Exception):
    """Bad input or a missing prerequisite, explained in the message.

    ``exit_code`` follows the command line's documented codes (README).
    """

    exit_code = 2

    def __init__(self, message: str, exit_code: int | None = None):
        super().__init__(message)
        if exit_code is not None:
            self.exit_code = exit_code

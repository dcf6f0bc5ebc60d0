"""User-facing errors.

Every problem that comes from what the user gave (a config key, a parameter, a file) raises
:class:`InputError` with one line that names the key or file and what is wrong. The command line
prints that line and exits with status 2; nothing else is printed.
"""


class InputError(ValueError):
    """Bad input from the user: a config key, a parameter value or a file.

    ``where`` names the key or file (for example ``"[space] lengths"`` or ``"map.fits"``);
    the message says what is wrong with it.
    """

    def __init__(self, message: str, where: str | None = None):
        self.where = where
        self.reason = message
        super().__init__(f"{where}: {message}" if where else message)

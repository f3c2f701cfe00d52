"""The project's own error types.

Every problem with user input (host files, rule sets, formulas, CIF files) is
raised as :class:`ScreeningError` with a message that names the file, the entry
and the field, so that the command line can print one clear line and exit with
status 2 instead of a traceback.
"""


class ScreeningError(Exception):
    """Bad input or missing data that stops a screen; the message is for the user."""

    def __init__(self, message: str, *, source: str | None = None,
                 entry: str | None = None, field: str | None = None):
        self.source = source
        self.entry = entry
        self.field = field
        parts = [p for p in (source, entry and f"entry {entry!r}", field and f"field {field!r}") if p]
        self.bare_message = message
        super().__init__(": ".join(parts + [message]) if parts else message)


class DataMissingError(ScreeningError):
    """A value that a rule needs is absent from the ion or element data."""

"""The one exception type for bad input: it renders as a single line naming
the file, line and column, which the command line prints before exiting with
status 2."""


class InputError(ValueError):
    """Bad input: ``file:line:column: message`` (line and column when known)."""

    def __init__(self, source, message, line=None, column=None):
        self.source = str(source)
        self.line = line
        self.column = column
        self.message = message
        super().__init__(str(self))

    def __str__(self):
        where = self.source
        if self.line is not None:
            where += f":{self.line}"
            if self.column is not None:
                where += f":{self.column}"
        return f"{where}: {self.message}"


class OutputError(InputError):
    """An output folder or file that cannot be written as asked (it exists
    and is not empty, it is a file, it cannot be created): the same one line
    and exit status 2 as bad input."""

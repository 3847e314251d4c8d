"""The one error type a user can cause, rendered by the CLI as one line and exit status 2."""


class InputError(Exception):
    """A mistake in a study or technology file: where it is, which key, and what was expected."""

    def __init__(self, source: str, key: str, expected: str, got: object = None):
        self.source, self.key, self.expected, self.got = source, key, expected, got
        message = f"{source}: {key}: expected {expected}"
        if got is not None:
            shown = repr(got)
            # A long value (a pasted file, a megabyte string) is cut: the line names it, not reprints it.
            message += f", got {shown if len(shown) <= 80 else shown[:77] + '...'}"
        super().__init__(message)


class PluginError(Exception):
    """A topology or output stage (built-in or third-party) that breaks its interface; one line, exit 2."""

"""The one error type a user can cause, rendered by the CLI as one line and exit status 2."""


class InputError(Exception):
    """A mistake in a study or technology file: where it is, which key, and what was expected."""

    def __init__(self, source: str, key: str, expected: str, got: object = None):
        self.source, self.key, self.expected, self.got = source, key, expected, got
        message = f"{source}: {key}: expected {expected}"
        if got is not None:
            message += f", got {got!r}"
        super().__init__(message)

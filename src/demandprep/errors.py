"""Errors meant for the user: one clear sentence and a hint, never a traceback."""


class UserError(Exception):
    """A problem with the user's input or config, reported as one line with a hint."""

    def __init__(self, message: str, hint: str | None = None) -> None:
        self.message = message
        self.hint = hint
        super().__init__(self.one_line())

    def one_line(self) -> str:
        """The message and hint on a single line."""
        text = " ".join(self.message.split())
        return f"{text} Hint: {self.hint}" if self.hint else text

"""The one-line input error, kept free of heavy imports.

The command line catches :class:`ProblemError` on every command, ``--help`` included, so
it lives here rather than in ``optimizer/problem.py`` (which pulls in numpy, pydantic and
pint). ``optimizer.problem`` re-exports it; both import paths name the same class.
"""

from __future__ import annotations


class ProblemError(Exception):
    """A problem file that cannot be used, with the field at fault and what to do.

    The line is always one line: characters that would break it are replaced, and an
    overlong field is cut.
    """

    def __init__(self, source: str, field: str, message: str):
        self.source = _one_line(str(source))
        self.field = _one_line(str(field), 120)
        self.message = _one_line(str(message), 400)
        super().__init__(self.line())

    def line(self) -> str:
        where = f"{self.source}: {self.field}" if self.field else self.source
        return f"{where}: {self.message}"


def _one_line(text: str, limit: int | None = None) -> str:
    text = "".join(c if c.isprintable() else "?" for c in text)
    if limit is not None and len(text) > limit:
        # keep the end too: it says what to do
        text = text[: limit // 2] + " ... " + text[-(limit // 2) :]
    return text

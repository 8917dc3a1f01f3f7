"""The project's exceptions: one root, a few subclasses, each carrying where it came from."""

from __future__ import annotations

__all__ = ["HarnessError", "SpecError", "ModelError"]


class HarnessError(Exception):
    """Root of every error the harness raises on purpose."""


class SpecError(HarnessError, ValueError):
    """A spec, object set or campaign file is malformed; carries the file and every problem found."""

    def __init__(self, file, problems):
        self.file = str(file)
        self.problems = list(problems)  # each: (field path or "", message)
        lines = [f"{self.file}: {_describe(field, msg)}" for field, msg in self.problems]
        super().__init__("\n".join(lines))


class ModelError(HarnessError):
    """A model could not be generated or loaded although its spec validated."""


def _describe(field, message):
    return f"field '{field}' {message}" if field else message

"""The tree of errors hosttool raises for bad input.

Every message is one line that names the file (and line, where known) and the field path.
The command line turns any ``HostToolError`` into that line on stderr and exit status 2.
"""

from __future__ import annotations


class HostToolError(Exception):
    """Base of every error caused by the user's input or environment (exit status 2)."""


class SpecError(HostToolError):
    """A bridge specification that cannot be read or is not valid.

    ``field`` is the dotted path of the offending key (``sensor.gauge_factor``,
    ``filter.stages[1].cutoff_hz``); ``line`` is 1-based when it could be located.
    """

    def __init__(self, message: str, *, file: str, field: str = "", line: int | None = None):
        self.file = file
        self.field = field
        self.line = line
        self.reason = message
        where = file if line is None else f"{file}:{line}"
        super().__init__(f"{where}: {field}: {message}" if field else f"{where}: {message}")


class DesignError(HostToolError):
    """A valid spec whose design cannot meet its headroom, response or word widths."""


class InputError(HostToolError):
    """Any other bad input: a readings or calibration file, an option, a path."""


class OutputError(HostToolError):
    """An output that cannot be written (missing or read-only folder, refused overwrite)."""


class CBuildError(HostToolError):
    """Building or running a firmware program failed."""


class ToolchainMissing(CBuildError):
    """A compiler or emulator the build kind needs is not on PATH."""


class BuildFailed(CBuildError):
    """The compiler refused the sources; the message carries its output."""


class RunTimedOut(CBuildError):
    """A program did not finish within its time limit."""

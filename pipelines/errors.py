"""Errors a user can cause, and the exit codes of the ``relcorr`` command.

A user error is reported as one line per problem (no traceback); anything
else is an internal error and says how to get the traceback.
"""
from __future__ import annotations

EXIT_OK = 0
EXIT_INTERNAL = 1      # a bug: please report, with the --verbose output
EXIT_CONFIG = 2        # bad command line or configuration; nothing ran
EXIT_PARTIAL = 3       # some partitions failed (file-level faults); the others completed
EXIT_BALANCE = 4       # rows in != rows out + rows quarantined somewhere (never expected)
EXIT_VERIFY = 5        # relcorr verify: a file the manifest lists is missing or modified, or an unexpected one
EXIT_MISSING_DAYS = 6  # relcorr run over UTC days: some days had no input; the others completed

EXIT_CODES = {
    EXIT_OK: "success: every partition produced its product and its counts balance",
    EXIT_INTERNAL: "internal error (a bug); rerun with --verbose and report the traceback",
    EXIT_CONFIG: "configuration or command-line error; nothing was run",
    EXIT_PARTIAL: "one or more partitions failed (unreadable input, missing column, wrong type); the others completed",
    EXIT_BALANCE: "a row-count balance check failed (rows in != rows out + rows quarantined)",
    EXIT_VERIFY: "relcorr verify: a file the manifest lists is missing or modified, or an unexpected product-like file is present",
    EXIT_MISSING_DAYS: "a run over UTC days found no input for some of them (listed); the other days completed",
}


class RelcorrError(Exception):
    """Base of the errors that are the user's to fix."""


class ConfigError(RelcorrError):
    """One or more problems in a TOML configuration.

    Each problem is (file, key path, message); ``str()`` gives one line each.
    """

    def __init__(self, problems: list[tuple[str, str, str]]):
        self.problems = list(problems)
        super().__init__("\n".join(self.lines()))

    def lines(self) -> list[str]:
        return [f"{path}: {key}: {msg}" if key else f"{path}: {msg}" for path, key, msg in self.problems]


class InputFileError(RelcorrError):
    """A file-level fault in one input: unreadable, truncated, missing or mistyped column."""

    def __init__(self, path: str, message: str):
        self.path = str(path)
        self.message = message
        super().__init__(f"{path}: {message}")

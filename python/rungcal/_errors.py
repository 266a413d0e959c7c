# SPDX-License-Identifier: MIT
"""The exceptions rungcal raises in Python (the library's InputError and BusyError)."""


class InputError(ValueError):
    """Bad input or configuration, which the user can fix.

    rule: the broken rule's short name (e.g. "unknown_relation"), stable for scripts;
    file: the file (or calibration, store) concerned; key: the config key, column or argument;
    row: the line or row when known, else None; detail: the message without its location;
    exit_code: the exit code the command line gives for it (2, or 7 for a refused write).
    """

    def __init__(self, message, rule="", file="", key="", row=None, detail=""):
        super().__init__(message)
        self.rule = rule
        self.file = file
        self.key = key
        self.row = row
        self.detail = detail or message
        self.exit_code = 7 if rule == "write_failed" else 2

    def __reduce__(self):  # pickled whole, e.g. back from a multiprocessing worker
        return (type(self), (str(self), self.rule, self.file, self.key, self.row, self.detail))


class BusyError(RuntimeError):
    """Another process held a lock (a store's publishers, a run folder) and the wait ran out."""

    exit_code = 5


class StageFailed(RuntimeError):
    """A stage stopped on a broken invariant inside rungcal (exit code 1): a bug to report."""

    exit_code = 1

# SPDX-License-Identifier: MIT
"""Stages run from Python exactly as from the command line: the stage's own main, in this
process, with the same options, checks and products."""

import os
from dataclasses import dataclass, field

from . import _rungcal
from ._errors import BusyError, InputError, StageFailed

# Exit codes that are outcomes, not failures (docs/exit-codes.md).
_OUTCOMES = {0, 3, 4, 6}


@dataclass
class StageResult:
    """A stage's outcome: exit code and its name (docs/exit-codes.md), the summary the stage
    printed on stdout, and the command line it ran."""

    stage: str
    exit_code: int
    exit_name: str
    summary: str
    arguments: list = field(default_factory=list)

    def __str__(self):
        return self.summary


def _option_words(key, value):
    flag = "--" + key.replace("_", "-")
    if value is None or value is False:
        return []
    if value is True:
        return [flag]
    if isinstance(value, (list, tuple)):
        return [flag, *(os.fspath(v) if isinstance(v, os.PathLike) else str(v) for v in value)]
    return [flag, os.fspath(value) if isinstance(value, os.PathLike) else str(value)]


def stage_arguments(config=None, **options):
    """The command-line words for options: config="fit.toml" -> --config fit.toml,
    out="x.json" -> --out x.json, dry_run=True -> --dry-run (False and None: left out), a
    list -> the option followed by each value."""
    words = _option_words("config", config)
    for key, value in options.items():
        words += _option_words(key, value)
    return words


def run_stage(stage, config=None, **options):
    """Runs rungcal-<stage> with --config config and the options given as keywords (the
    command line's long options, '-' written '_'), e.g. run_stage("fit", config="fit.toml",
    bootstrap=0). Returns a StageResult for exit codes 0, 3, 4 and 6; raises InputError
    (exit 2, or 7 for a refused write) with the rule, file and key, BusyError (5), or
    StageFailed (1, an internal error)."""
    arguments = stage_arguments(config, **options)
    code, summary, failure = _rungcal.run_stage_main(stage, arguments)
    if code in _OUTCOMES:
        return StageResult(stage, code, _rungcal.exit_code_name(code), summary, arguments)
    failure = failure or {"rule": "", "file": "", "key": "", "row": None, "detail": "",
                          "message": f"rungcal-{stage} stopped with exit code {code}"}
    if failure["rule"] == "command_line":  # CLI11's words alone do not name the stage
        failure["detail"] = f"rungcal-{stage} {' '.join(arguments)}: {failure['detail']}"
        failure["message"] = _rungcal.format_input_error("", "", "command_line", failure["detail"])
    if code in (2, 7):
        raise InputError(failure["message"], rule=failure["rule"], file=failure["file"], key=failure["key"],
                         row=failure["row"], detail=failure["detail"])
    if code == 5:
        raise BusyError(failure["message"])
    raise StageFailed(f"rungcal-{stage}: {failure['message']}")


def stage_names():
    """The stages run_stage runs (pipeline/rungcal-<stage>.cpp)."""
    return list(_rungcal.stage_names())

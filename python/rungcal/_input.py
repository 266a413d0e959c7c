# SPDX-License-Identifier: MIT
"""InputError raised from the Python side, worded as the library words its own."""

from . import _rungcal
from ._errors import InputError


def input_error(rule, message, file="", key=""):
    """An InputError with the library's message format: "file: key 'k': [rule] message"."""
    text = _rungcal.format_input_error(str(file), str(key), rule, message)
    return InputError(text, rule=rule, file=str(file), key=str(key), detail=message)

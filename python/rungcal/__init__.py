# SPDX-License-Identifier: MIT
"""rungcal from Python: calibrations, stores, products and stages through the same library
the command line uses (a thin binding; docs/python.md).

    import rungcal
    cal = rungcal.load_calibration("demo_out/store/halden-peak@latest")
    M, M_err = cal.absolute_magnitude("W_VI", log_period=1.2, feh=0.0)
"""

from ._calibration import Calibration, load_calibration
from ._errors import BusyError, InputError, StageFailed
from ._rungcal import software_commit, software_version
from ._stages import StageResult, run_stage, stage_arguments, stage_names
from ._store import Store
from ._tables import TableArray, read_fit, read_json, read_residuals, read_table

__version__ = software_version

__all__ = [
    "BusyError", "Calibration", "InputError", "StageFailed", "StageResult", "Store", "TableArray",
    "load_calibration", "read_fit", "read_json", "read_residuals", "read_table", "run_stage",
    "software_commit", "software_version", "stage_arguments", "stage_names",
]

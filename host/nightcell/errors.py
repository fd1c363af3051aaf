"""The project's named exceptions: one base class, each error says what happened and what to do.

The CLI turns any ``NightcellError`` into a one-line message and a documented exit code;
nothing here may import from the rest of the package.
"""

from __future__ import annotations

__all__ = [
    "NightcellError",
    "InputError",
    "DeviceNotFound",
    "DeviceTimeout",
    "DeviceError",
    "ProtocolError",
    "RecordConflict",
    "StoreError",
    "SchemaTooNew",
    "AnalysisError",
    "FitFailed",
    "ShapeMismatch",
    "NonFiniteInput",
    "TimeOrderError",
    "TooFewPoints",
    "DegenerateData",
    "OutsideCalibration",
    "SuspectData",
]


class NightcellError(Exception):
    """Base of every error nightcell raises on purpose; ``exit_code`` is the CLI's exit status."""

    exit_code = 1


class InputError(NightcellError):
    """A file, option or value given by the user cannot be used as it is."""

    exit_code = 2


class DeviceNotFound(NightcellError):
    """No board answered where one was expected."""

    exit_code = 3


class DeviceTimeout(NightcellError):
    """A board stopped answering in the middle of an exchange."""

    exit_code = 3


class DeviceError(NightcellError):
    """The board answered with an error message of its own."""

    exit_code = 3


class ProtocolError(NightcellError):
    """Bytes from the board could not be understood even after retries."""

    exit_code = 3


class RecordConflict(ProtocolError):
    """A board's records carry the keys of rows already stored, with other content (another journal's keys)."""


class StoreError(NightcellError):
    """The SQLite database cannot be opened, migrated or written."""

    exit_code = 4


class SchemaTooNew(StoreError):
    """The database was written by a newer nightcell than the one running."""


class AnalysisError(NightcellError):
    """The data cannot support the analysis asked for (too few points, all x equal, NaN...)."""

    exit_code = 5


class FitFailed(AnalysisError):
    """A fit did not converge or gave no usable uncertainty."""


class ShapeMismatch(InputError):
    """Arrays that must pair up element by element have different lengths or shapes."""


class NonFiniteInput(InputError):
    """A value the analysis needs is NaN or infinite (a missing reading, a bad blank)."""


class TimeOrderError(InputError):
    """Times of a run are not strictly increasing (unsorted or repeated)."""


class TooFewPoints(AnalysisError):
    """Fewer usable points than the model needs to give parameters with standard errors."""


class DegenerateData(AnalysisError):
    """The data cannot determine the model (all x equal, a constant signal, a singular design)."""


class OutsideCalibration(AnalysisError):
    """A reading has no concentration on the calibration curve (beyond a quadratic's turning point)."""


class SuspectData(AnalysisError):
    """The data look wrong (a blocked blank, standards that do not rise): refused unless the user confirms."""

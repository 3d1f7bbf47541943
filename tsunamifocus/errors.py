"""Exception and warning classes of tsunamifocus.

Every error the package raises on purpose derives from :class:`TsunamiFocusError`
and also from the matching builtin, so callers may catch either::

    try:
        depth = load_bathymetry("grid.nc", values="elevation")
    except tsunamifocus.DataFileError as exc:   # also an OSError
        ...

Messages name the file, the field, the value and what was expected.
"""

from __future__ import annotations

__all__ = [
    "TsunamiFocusError",
    "InputError",
    "DataFileError",
    "CRSError",
    "SignConventionError",
    "ResourceLimitError",
    "ScenarioError",
    "SourceError",
    "RayError",
    "CoastError",
    "OutputExistsError",
    "HealthCheckError",
    "EnsembleError",
    "TsunamiFocusWarning",
    "ScalingWarning",
    "SourceWarning",
    "ResolutionWarning", "PointWarning",
    "DataWarning",
    "cut",
    "check_work",
    "MESSAGE_VALUE_CHARS",
    "MESSAGE_LINE_CHARS",
]

#: Longest value quoted in a message [characters], and longest message line the command line prints.
MESSAGE_VALUE_CHARS = 80
MESSAGE_LINE_CHARS = 1000


def cut(text: object, limit: int = MESSAGE_VALUE_CHARS) -> str:
    """``text`` shortened for a one-line message: head and tail kept, the middle replaced.

    The one place that shortens values quoted in messages, so a huge value (a 10 MB description)
    never becomes a huge error line. Both ends are kept because they are what tells values apart
    (the start of a name, the file name at the end of a path).

    Examples
    --------
    >>> cut("x" * 10)
    'xxxxxxxxxx'
    >>> cut("a" * 50 + "b" * 50, 20)
    'aaaaaaaa...bbbbbbbbb (100 characters)'
    """
    s = str(text)
    if len(s) <= limit:
        return s
    head = (limit - 3) // 2
    tail = limit - 3 - head
    return f"{s[:head]}...{s[len(s) - tail:]} ({len(s)} characters)"


class TsunamiFocusError(Exception):
    """Root of every error raised on purpose by tsunamifocus."""


class InputError(TsunamiFocusError, ValueError):
    """A parameter or input value is out of range or of the wrong kind."""


class DataFileError(TsunamiFocusError, OSError):
    """A data file is missing, unreadable, corrupt or not of the expected layout."""


class CRSError(InputError):
    """A grid or vector file has no usable coordinate reference system."""


class SignConventionError(InputError):
    """Whether grid values are elevations or depths cannot be decided safely."""


class ResourceLimitError(TsunamiFocusError, MemoryError):
    """A job would need more memory (or time) than the configured limit."""


class ScenarioError(InputError):
    """A scenario file has an unknown key, a wrong type or an out-of-range value."""


class SourceError(InputError):
    """An earthquake source description is invalid or does not fit the grid."""


class RayError(InputError):
    """Ray launch parameters are invalid (on land, outside the grid, bad counts...)."""


class CoastError(InputError):
    """A coastline cannot be built or read, or its segmentation is impossible."""


class OutputExistsError(TsunamiFocusError, FileExistsError):
    """An output folder already holds results and ``overwrite`` was not given."""


class HealthCheckError(TsunamiFocusError, RuntimeError):
    """A numerical health check of a run failed (e.g. energy bookkeeping error)."""


class EnsembleError(TsunamiFocusError, RuntimeError):
    """Every member of an ensemble failed, or the ensemble cannot be run at all."""


class TsunamiFocusWarning(UserWarning):
    """Root of the warnings of tsunamifocus: allowed, but suspicious."""


class ScalingWarning(TsunamiFocusWarning):
    """A fault geometry is far from the published magnitude scaling relation."""


class SourceWarning(TsunamiFocusWarning):
    """A source is usable but suspicious: much of its displacement on land, a thrust dipping seaward."""


class ResolutionWarning(TsunamiFocusWarning):
    """Grid resolution, ray count or segment length limits what a result can say."""


class PointWarning(TsunamiFocusWarning):
    """A point of interest got no value (outside the grid, or no sea cell / segment within its radius)."""


class DataWarning(TsunamiFocusWarning):
    """A few values of an input file are impossible or suspicious and were set aside (named in the message)."""


def check_work(amount: float, limit: float | None, what: str, advice: str) -> None:
    """The one work-size guard: refuse, before it starts, work larger than ``limit``.

    Parameters
    ----------
    amount : float
        Estimated size of the work (segments, cell updates ...), counted before any of it is done.
    limit : float or None
        The stated limit (``constants.WORK_LIMITS``); None: forced, no limit.
    what : str
        The work and where its size comes from, e.g. ``"segment_km=0.001: 3.1e+07 segments"``.
    advice : str
        How to make the work smaller (or force it).

    Raises
    ------
    ResourceLimitError
        ``amount`` exceeds ``limit``.
    """
    if limit is not None and amount > limit:
        raise ResourceLimitError(f"{what}, above the limit of {limit:.3g}; {advice}")

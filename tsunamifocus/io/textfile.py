"""The one reader of small UTF-8 text inputs (scenario files, subfault tables): bytes, BOM, encoding."""

from __future__ import annotations

import pathlib
from collections.abc import Callable

__all__ = ["read_utf8_text"]


def read_utf8_text(path: pathlib.Path, what: str, error: type[Exception], save_as: str, expected: str,
                   where: Callable[[int], str] = lambda line: f": line {line}") -> str:
    """Read ``path`` as UTF-8 text (a leading byte-order mark dropped).

    Parameters
    ----------
    path : pathlib.Path
        The file.
    what : str
        What the file is, for messages (e.g. ``"scenario file"``).
    error : type
        Exception raised (one line naming the file).
    save_as : str
        Advice on a bad encoding (e.g. ``"save the scenario file as UTF-8"``).
    expected : str
        What was expected where a folder was given (e.g. ``"a scenario .toml file"``).
    where : callable
        Formats a line number after the file name (``": line 3"``, ``":3"``).

    Returns
    -------
    str

    Raises
    ------
    error
        Missing, a folder, unreadable, or not UTF-8 (with the line of the first bad byte).
    """
    p = pathlib.Path(path)
    try:
        raw = p.read_bytes()
    except FileNotFoundError:
        raise error(f"{p}: {what} not found") from None
    except IsADirectoryError:
        raise error(f"{p}: is a folder, expected {expected}") from None
    except OSError as exc:
        raise error(f"{p}: cannot read {what} ({exc.strerror or exc})") from None
    if raw.startswith(b"\xef\xbb\xbf"):
        raw = raw[3:]
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = raw[: exc.start].count(b"\n") + 1
        raise error(f"{p}{where(line)}: not UTF-8 text (byte 0x{raw[exc.start]:02x}); {save_as}") from None

"""One exception hierarchy for mapdrift.

Every user-facing error says what is wrong, where (file, column, key) and how to fix it, in one
line. The CLI maps these classes to exit codes (see ``EXIT_CODES``); the library never prints.
Subclasses are also builtins so that notebook users can catch ``ValueError`` or ``OSError``.
"""

from __future__ import annotations

from collections.abc import Sequence

__all__ = [
    "check_choice",
    "EXIT_CODES",
    "ConfigError",
    "EncoderError",
    "InputError",
    "MapdriftError",
    "OutputExistsError",
    "StepError",
]


class MapdriftError(Exception):
    """Root of all mapdrift errors; the message is one line meant for the user."""

    exit_code = 1


class InputError(MapdriftError, ValueError):
    """An input file or its content stops the job (bad IDs, no CRS, unreadable file...)."""

    exit_code = 1


class ConfigError(MapdriftError, ValueError):
    """A run configuration or a command-line combination is wrong (unknown key, bad type...)."""

    exit_code = 2


def check_choice(flag: str, value: object, valid: Sequence[str]) -> None:
    """Raise the one ConfigError every option shares when ``value`` is not one of ``valid``.

    >>> check_choice("--islands", "nearest", ("nearest", "exclude"))
    """
    if value not in valid:
        raise ConfigError(
            f"{flag} {value!r} is not a valid option, must be one of {', '.join(valid)}"
        )


class OutputExistsError(MapdriftError, FileExistsError):
    """An earlier run's output would be overwritten and ``--force`` was not given."""

    exit_code = 3


class EncoderError(MapdriftError, RuntimeError):
    """A video or image encoder is missing or failed; we never silently switch format."""

    exit_code = 4


class StepError(MapdriftError, RuntimeError):
    """A pipeline step failed part-way; earlier outputs were left untouched."""

    exit_code = 4


#: Exit codes of the ``mapdrift`` command, documented in the README.
EXIT_CODES: dict[int, str] = {
    0: "success (warnings allowed)",
    1: "input problem that stops the job (file, column, IDs, values, CRS)",
    2: "command-line usage or configuration error",
    3: "output exists (pass --force to replace an earlier run), or --out is not an earlier run's "
    "folder, or another run is writing to it",
    4: "a step or encoder failed (e.g. ffmpeg missing); earlier outputs untouched",
    130: "interrupted (Ctrl-C)",
    141: "the reader of the output closed it early (e.g. `| head -1`); nothing more printed",
}

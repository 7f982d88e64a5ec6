"""The exceptions sweeper raises on purpose.

SweeperError                 base; the command line maps each branch to an exit code once
 +-- InputError              exit 2: the user's input cannot be used as given
 |    +-- SpecError          a spec file (or a data file it names) is invalid: file:key: message
 |    +-- StudyNotFound      no study at the given storage location
 |    +-- SpecChanged        the spec differs from the one stored in the study
 +-- RunFailure              exit 1: the work started but could not finish
      +-- TooManyFailures    consecutive trial failures reached the spec's limit
      +-- StorageFailure     the study database could not be opened or written
           +-- DiskFull      no space left where the study or a page is written
 +-- Interrupted             exit 130: the user or the scheduler asked us to stop
"""

from __future__ import annotations


class SweeperError(Exception):
    """Base of every error sweeper raises deliberately."""

    exit_code = 1


class InputError(SweeperError):
    """The input (command line, spec, data, storage location) cannot be used."""

    exit_code = 2


class SpecError(InputError):
    """A spec file or a data file it names is invalid.

    ``str()`` gives ``file: key: message`` so that the user sees where to look and what to do.
    """

    def __init__(self, source: str, key: str, message: str) -> None:
        self.source = source
        self.key = key
        self.message = message
        where = f"{source}: {key}" if key else source
        super().__init__(f"{where}: {message}")


class StudyNotFound(InputError):
    """No study exists at the storage location given."""


class SpecChanged(InputError):
    """The spec given differs from the one the study was started with."""


class RunFailure(SweeperError):
    """Work started but could not be finished."""


class TooManyFailures(RunFailure):
    """Too many trials in a row failed; the sweep stopped."""


class StorageFailure(RunFailure):
    """The study database could not be opened or written."""


class DiskFull(StorageFailure):
    """No space left on the disk under the study database or an output file.

    ``str()`` names the path and what to do: ``disk full at PATH; free space, then: ...``.
    """


class Interrupted(SweeperError):
    """The sweep was asked to stop (Ctrl-C, SIGTERM)."""

    exit_code = 130

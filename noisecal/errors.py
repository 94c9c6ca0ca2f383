"""The one exception family of noisecal.

Every error a user can cause is a :class:`NoisecalError`. Its message is one
line saying what is wrong, where (file, row, column) and what to do; the CLI
prints it and exits with status 2.
"""


class NoisecalError(Exception):
    """Base of all errors noisecal reports to a user."""


class InputError(NoisecalError):
    """A recording or option cannot be used as given."""


class UnitError(InputError):
    """A unit is missing, unknown, or of the wrong kind."""


class AnalysisError(NoisecalError):
    """The data are not enough for the analysis asked."""


class OutputError(NoisecalError):
    """An output cannot be written where asked."""

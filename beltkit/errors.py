"""The exceptions beltkit raises.

All derive from :class:`BeltkitError`; the ones about bad values also derive
from :class:`ValueError`, so ``except ValueError`` keeps working for callers
that do not know beltkit's hierarchy.
"""

__all__ = [
    "BeltkitError",
    "ConventionError",
    "FieldModelError",
    "MappingError",
    "OptionError",
    "PhysicsError",
    "SurveyError",
]


class BeltkitError(Exception):
    """Base class of every error raised by beltkit."""


class PhysicsError(BeltkitError, ValueError):
    """An argument is outside the domain where the physics is defined.

    Examples: L below 1, a negative kinetic energy, a pitch angle outside
    0-180 degrees, a footpoint altitude above the field line's apex.
    """


class ConventionError(BeltkitError, ValueError):
    """A dataset does not follow beltkit's data conventions.

    Parameters
    ----------
    problems : list of str
        Every problem found, each naming the variable and what is wrong.
    source : str, optional
        The file or object the dataset came from, for the message.
    """

    def __init__(self, problems, source=None):
        self.problems = list(problems)
        self.source = source
        where = f" in {source}" if source else ""
        head = f"{len(self.problems)} problem(s) with the dataset{where}:"
        super().__init__("\n  - ".join([head, *self.problems]))


class FieldModelError(BeltkitError, ValueError):
    """A field model cannot answer for the given points or times.

    Examples: a point inside the Earth, a date outside the coefficient
    table's validity, a field line that does not close.
    """


class MappingError(BeltkitError, ValueError):
    """A variable-name mapping is malformed or does not fit the file it is applied to."""


class SurveyError(BeltkitError, ValueError):
    """Summaries that cannot be surveyed; ``problems`` holds one line per file."""

    def __init__(self, problems):
        self.problems = list(problems)
        super().__init__("; ".join(self.problems))


class OptionError(BeltkitError, ValueError):
    """Command options that do not fit together, or inputs that match nothing.

    The ``beltkit`` command prints its message as one line (naming the
    command-line options) and exits with 1, never with a traceback.
    """

"""Renamed keyword arguments: an old public spelling kept for one release, with a warning.

:func:`renamed_keyword` wraps a function whose keyword argument has a new
name. A call with the old name warns (:class:`FutureWarning`, shown by
default, naming the new keyword) and runs as if the new name had been given;
a call with both names is refused with a :class:`TypeError`, as Python
refuses a keyword given twice. The wrapped function's signature (and so
``help``) shows the new name only.
"""

from __future__ import annotations

import functools
import warnings

__all__ = ["renamed_keyword"]


def renamed_keyword(old: str, new: str, *, removal: str = "the next release"):
    """Return a decorator that accepts keyword `old` as a deprecated spelling of `new`.

    Parameters
    ----------
    old, new : str
        The former and the present name of the keyword argument.
    removal : str
        When the old spelling goes (said in the warning).

    Returns
    -------
    callable
        The decorator.
    """

    def decorate(func):
        where = func.__qualname__

        @functools.wraps(func)
        def wrapper(*args, **kwargs):
            if old in kwargs:
                if new in kwargs:
                    raise TypeError(f"{where}() got both {new}= and its former spelling "
                                    f"{old}=; give {new}= only")
                warnings.warn(f"{where}(): the keyword {old}= is deprecated and will be "
                              f"removed in {removal}; use {new}= (same meaning)",
                              FutureWarning, stacklevel=2)
                kwargs[new] = kwargs.pop(old)
            return func(*args, **kwargs)

        return wrapper

    return decorate

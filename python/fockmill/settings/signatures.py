"""Keyword-only options with a deprecation period for positional callers.

Public functions take their essential arguments positionally and every option by
keyword. Callers written against the old signatures, which accepted some options
positionally, keep working for one release: :func:`options_were_positional` maps the
extra positional values onto their old names and warns.
"""

from __future__ import annotations

import functools
import warnings
from collections.abc import Callable
from typing import Any, TypeVar

__all__ = ["options_were_positional"]

F = TypeVar("F", bound=Callable[..., Any])


def options_were_positional(essential: int, names: tuple[str, ...]) -> Callable[[F], F]:
    """Accept ``names`` positionally after the first ``essential`` arguments, with a
    DeprecationWarning naming the keyword to use instead.

    Parameters
    ----------
    essential : int
        How many leading positional arguments the function keeps.
    names : tuple of str
        The options that used to follow them positionally, in their old order.
    """

    def decorate(function: F) -> F:
        @functools.wraps(function)
        def wrapper(*args: Any, **kwargs: Any) -> Any:
            if len(args) > essential:
                extra = args[essential:]
                if len(extra) > len(names):
                    raise TypeError(
                        f"{function.__name__}() takes at most {essential + len(names)} "
                        f"positional arguments ({len(args)} given)"
                    )
                moved = names[: len(extra)]
                for name, value in zip(moved, extra, strict=True):
                    if name in kwargs:
                        raise TypeError(
                            f"{function.__name__}() got multiple values for argument {name!r}"
                        )
                    kwargs[name] = value
                warnings.warn(
                    f"{function.__name__}(): pass {', '.join(moved)} by keyword "
                    f"({', '.join(f'{n}=...' for n in moved)}); options given by position "
                    "are deprecated and will be refused in the next release",
                    DeprecationWarning,
                    stacklevel=2,
                )
                args = args[:essential]
            return function(*args, **kwargs)

        return wrapper  # type: ignore[return-value]

    return decorate

"""Input errors that carry the field they concern.

Every entry point validates its input in one place and raises a single
:class:`InputError` holding *all* problems found, so that the user fixes them
in one go. The command line prints the error as one line and exits with 2.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from numbers import Real
from typing import Iterable


@dataclass(frozen=True)
class Problem:
    """One problem with one input field (option, dotted key or argument)."""

    field: str
    message: str

    def __str__(self) -> str:
        return f"{self.field}: {self.message}" if self.field else self.message


class InputError(ValueError):
    """Bad input: one or more :class:`Problem` s.

    Parameters
    ----------
    problems : str or iterable of Problem
        Either the field name (then ``message`` is required) or problems.
    message : str, optional
        The problem, when ``problems`` is a field name.
    source : str, optional
        File the problems were found in; prefixed to the message.
    """

    def __init__(
        self,
        problems: str | Iterable[Problem],
        message: str | None = None,
        *,
        source: str | None = None,
    ) -> None:
        if isinstance(problems, str):
            if message is None:
                raise TypeError("InputError(field, message) needs a message")
            probs = [Problem(problems, message)]
        else:
            probs = list(problems)
        if not probs:
            raise TypeError("InputError needs at least one problem")
        self.problems: list[Problem] = probs
        self.source = source
        super().__init__(self.one_line())

    def one_line(self) -> str:
        """All problems on a single line, as the command line prints them."""
        text = "; ".join(str(p) for p in self.problems)
        if self.source:
            text = f"{self.source}: {text}"
        # keys and values may hold any character: the line must stay one line
        text = text.replace("\n", " ")
        if not text.isprintable():
            text = "".join(ch if ch.isprintable() else repr(ch)[1:-1] for ch in text)
        return text

    def with_source(self, source: str) -> "InputError":
        return InputError(self.problems, source=source)

    def prefixed(self, prefix: str) -> "InputError":
        """Same problems with ``prefix.`` before each field name."""
        return InputError(
            [Problem(f"{prefix}.{p.field}" if p.field else prefix, p.message) for p in self.problems],
            source=self.source,
        )


class Collector:
    """Gather problems, then raise them all at once.

    Examples
    --------
    >>> c = Collector()
    >>> x = c.number("margin", 0.0, low=0, low_open=True)
    >>> c.raise_if_any()
    Traceback (most recent call last):
    ...
    simcheck.errors.InputError: margin: must be > 0, got 0.0
    """

    def __init__(self, prefix: str = "") -> None:
        self.problems: list[Problem] = []
        self.prefix = prefix

    def _name(self, field: str) -> str:
        return f"{self.prefix}.{field}" if self.prefix and field else (self.prefix or field)

    def add(self, field: str, message: str) -> None:
        self.problems.append(Problem(self._name(field), message))

    def extend(self, err: InputError) -> None:
        for p in err.problems:
            self.problems.append(Problem(self._name(p.field) if p.field else self._name(""), p.message))

    def number(
        self,
        field: str,
        value: object,
        *,
        low: float | None = None,
        high: float | None = None,
        low_open: bool = False,
        high_open: bool = False,
        integer: bool = False,
    ) -> float | int | None:
        """Check that ``value`` is a finite real number in range.

        Returns the value (as int when ``integer``) or None after recording a
        problem. Booleans are refused as numbers.
        """
        if isinstance(value, bool) or not isinstance(value, Real):
            self.add(field, f"must be a number, got {shown(value)}")
            return None
        try:
            v = float(value)
        except OverflowError:  # an integer beyond the float range (about 1.8e308)
            self.add(field, f"must be a finite number, got {shown(value)}, beyond the range of floating-point numbers")
            return None
        if not math.isfinite(v):
            self.add(field, f"must be a finite number, got {shown(value)}")
            return None
        if integer and v != math.floor(v):
            self.add(field, f"must be a whole number, got {shown(value)}")
            return None
        ok = True
        if low is not None and (v <= low if low_open else v < low):
            ok = False
        if high is not None and (v >= high if high_open else v > high):
            ok = False
        if not ok:
            self.add(field, f"must be {_range_text(low, high, low_open, high_open)}, got {shown(value)}")
            return None
        return int(v) if integer else v

    def raise_if_any(self, source: str | None = None) -> None:
        if self.problems:
            raise InputError(self.problems, source=source)


#: longest shown value in a message (longer ones are cut, so a line stays readable)
SHOWN_MAX = 60


def shown(value: object) -> str:
    """A value as a message shows it: repr, cut to :data:`SHOWN_MAX` characters.

    Integers too long for ``repr`` (Python refuses to convert integers of
    more than 4,300 digits to text) and too long to read are named by their
    number of digits instead.

    Examples
    --------
    >>> shown(10**400)
    'a whole number of 401 digits'
    >>> shown("x" * 100)
    "'xxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxx... (102 characters)"
    """
    if isinstance(value, int) and not isinstance(value, bool) and value.bit_length() > 200:
        if value.bit_length() > 14_000:  # beyond 4,300 digits str() refuses; count from the bits
            return f"a whole number of about {int(value.bit_length() * 0.30103) + 1} digits"
        return f"a whole number of {len(str(abs(value)))} digits"
    try:
        text = repr(value)
    except (ValueError, RecursionError):
        return f"a {type(value).__name__}"
    if len(text) > SHOWN_MAX:
        return f"{text[:SHOWN_MAX - 20]}... ({len(text)} characters)"
    return text


def _range_text(low, high, low_open, high_open) -> str:
    if low is not None and high is not None:
        lb = "(" if low_open else "["
        hb = ")" if high_open else "]"
        return f"in {lb}{_fmt(low)}, {_fmt(high)}{hb}"
    if low is not None:
        return f"{'>' if low_open else '>='} {_fmt(low)}"
    if high is not None:
        return f"{'<' if high_open else '<='} {_fmt(high)}"
    return "a number"


def _fmt(x: float) -> str:
    return str(int(x)) if float(x).is_integer() else repr(float(x))

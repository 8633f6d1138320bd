"""The package's own errors and warnings.

Every refusal of user input is a :class:`InputError` (a ``ValueError``) whose message names the field
(as a key path such as ``solution.cryoprotectants[0].mass_percent``), the value, and the valid range or
the allowed words, with a "did you mean" for near misses.
"""

from __future__ import annotations

import difflib
from collections.abc import Iterable
from typing import Any


class PlannerError(ValueError):
    """Base class of every error the planner raises on purpose."""


class InputError(PlannerError):
    """Bad input: names the field, the value and what is allowed.

    Parameters
    ----------
    field : str
        Key path of the offending input, e.g. ``sample.volume_ml``.
    value : Any
        The value that was given.
    allowed : str
        The valid range or the allowed words, in plain words ("0.001 to 1000", "one of: a, b").
    hint : str, optional
        Extra advice, e.g. a "did you mean".
    """

    def __init__(self, field: str, value: Any, allowed: str, hint: str | None = None):
        self.field = field
        self.value = value
        self.allowed = allowed
        self.hint = hint
        # "missing" stands for a key or box left empty: said as such, not as if someone had typed it
        shown = "no value given" if value == "missing" else f"{value!r} is not valid"
        message = f"{field}: {shown}; allowed: {allowed}"
        if hint:
            message += f" ({hint})"
        super().__init__(message)


class ModelRangeError(PlannerError):
    """A model was asked for a value where it does not apply and must not be extrapolated.

    Parameters
    ----------
    quantity : str
        Name of the input quantity that is out of range (core name, SI unit).
    value : Any
        The offending value(s).
    allowed : str
        The model's validity range in words.
    model : str
        The model's name.
    """

    def __init__(self, quantity: str, value: Any, allowed: str, model: str):
        self.quantity = quantity
        self.value = value
        self.allowed = allowed
        self.model = model
        super().__init__(f"{model}: {quantity} = {value!r} is outside the model's range ({allowed})")


class ExtrapolationWarning(UserWarning):
    """A model was used outside its fitted range; the result object carries the same flag."""


def did_you_mean(word: str, choices: Iterable[str]) -> str | None:
    """Return ``"did you mean 'x'?"`` for the nearest choice, or None when nothing is near."""
    close = difflib.get_close_matches(str(word), list(choices), n=1, cutoff=0.6)
    return f"did you mean {close[0]!r}?" if close else None


def choice_error(field: str, value: Any, choices: Iterable[str]) -> InputError:
    """An :class:`InputError` for a word that is not one of ``choices``."""
    choices = list(choices)
    return InputError(field, value, "one of: " + ", ".join(choices), did_you_mean(str(value), choices))

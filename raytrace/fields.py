"""Typed reads of JSON values that report problems instead of raising.

Each reader takes the containing object, the key, the JSON path of the object and the Problems
collector; it returns the value (or a default) and records what was wrong, so one pass over a
file finds every problem."""
from __future__ import annotations

import math
import re
from typing import Any

from .errors import Problems

MISSING = "<missing>"
# Largest coordinate or length a scene may hold (mm): 1 km is far beyond any bench, and keeps
# squared distances and tolerances well inside double precision.
MAX_COORD = 1e6
# Largest repeat count a shape builder may be asked for (prisms in a strip, polygon sides).
MAX_COUNT = 100_000


class NonFinite:
    """Stands in for NaN/Infinity tokens, which JSON does not allow but Python's parser reads."""

    def __init__(self, token: str):
        self.token = token

    def __repr__(self) -> str:
        return self.token


class HugeInteger(NonFinite):
    """Stands in for an integer too long for a float (JSON allows any number of digits)."""

    def __init__(self, digits: str):
        super().__init__(f"{digits[:12]}... ({len(digits.lstrip('-'))} digits)")


MAX_INT_DIGITS = 300   # 1e300 is beyond any value a scene needs, and still converts to a float


def parse_int(digits: str):
    """JSON integer hook: ordinary integers as int, absurdly long ones as a HugeInteger marker
    (Python refuses to convert more than 4300 digits, and floats overflow past 1e308)."""
    return int(digits) if len(digits) <= MAX_INT_DIGITS else HugeInteger(digits)


def type_name(value: Any) -> str:
    if isinstance(value, NonFinite):
        return value.token
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return repr(value)
    if isinstance(value, str):
        return repr(value) if len(value) < 40 else repr(value[:37] + "...")
    if isinstance(value, list):
        return f"a list of {len(value)}"
    if isinstance(value, dict):
        return "an object"
    return type(value).__name__


def is_number(value: Any) -> bool:
    """A finite JSON number.  Integers too large for a float (JSON allows any digits) are not."""
    if not isinstance(value, (int, float)) or isinstance(value, bool):
        return False
    try:
        return math.isfinite(value)
    except OverflowError:
        return False


def check_keys(obj: dict, accepted: tuple[str, ...], path: str, problems: Problems) -> None:
    for key in obj:
        if key not in accepted:
            problems.add(f"{path}.{key}", f"<unknown key {key!r}>", f"one of the keys {', '.join(accepted)}")


def object_with_keys(value: Any, accepted: tuple[str, ...], where: str, problems: Problems) -> dict | None:
    """An object whose keys are all among `accepted` (unknown keys are reported), or None."""
    d = obj(value, where, problems)
    if d is not None:
        check_keys(d, accepted, where, problems)
    return d


def number(obj: dict, key: str, path: str, problems: Problems, default: Any = MISSING,
           minimum: float | None = None, exclusive: bool = False, maximum: float | None = None,
           what: str = "a number") -> float | None:
    if key not in obj:
        if default is MISSING:
            problems.add(f"{path}.{key}", MISSING, _number_phrase(what, minimum, exclusive, maximum))
            return None
        return default
    return number_value(obj[key], f"{path}.{key}", problems, minimum, exclusive, maximum, what)


def number_value(value: Any, where: str, problems: Problems, minimum: float | None = None,
                 exclusive: bool = False, maximum: float | None = None, what: str = "a number") -> float | None:
    phrase = _number_phrase(what, minimum, exclusive, maximum)
    if not is_number(value):
        problems.add(where, f"<{type_name(value)}>", phrase)
        return None
    v = float(value)
    if minimum is not None and (v < minimum or (exclusive and v == minimum)):
        problems.add(where, value, phrase)
        return None
    if maximum is not None and v > maximum:
        problems.add(where, value, phrase)
        return None
    return v


def _number_phrase(what: str, minimum, exclusive, maximum) -> str:
    phrase = f"{what} (finite)" if minimum is None and maximum is None else what
    if minimum is not None and maximum is not None:
        if exclusive:
            return f"{what} greater than {minimum:g} and at most {maximum:g}"
        return f"{what} from {minimum:g} to {maximum:g}"
    if minimum is not None:
        return f"{what} {'greater than' if exclusive else 'at least'} {minimum:g}"
    if maximum is not None:
        return f"{what} at most {maximum:g}"
    return phrase


def integer(obj: dict, key: str, path: str, problems: Problems, default: Any = MISSING,
            minimum: int | None = None, maximum: int | None = None) -> int | None:
    expected = "a whole number" + (f" at least {minimum}" if minimum is not None else "")
    if maximum is not None:
        expected += f"{' and' if minimum is not None else ''} at most {maximum}"
    if key not in obj:
        if default is MISSING:
            problems.add(f"{path}.{key}", MISSING, expected)
            return None
        return default
    v = obj[key]
    if not is_number(v) or float(v) != int(v):
        problems.add(f"{path}.{key}", f"<{type_name(v)}>", expected)
        return None
    if (minimum is not None and v < minimum) or (maximum is not None and v > maximum):
        problems.add(f"{path}.{key}", v, expected)
        return None
    return int(v)


def string(obj: dict, key: str, path: str, problems: Problems, default: Any = MISSING,
           choices: tuple[str, ...] | None = None, nonempty: bool = False) -> str | None:
    if key not in obj:
        if default is MISSING:
            problems.add(f"{path}.{key}", MISSING, "a text" if not choices else f"one of {', '.join(choices)}")
            return None
        return default
    v = obj[key]
    if not isinstance(v, str) or (nonempty and not v.strip()):
        problems.add(f"{path}.{key}", f"<{type_name(v)}>", "a non-empty text" if nonempty else "a text")
        return None
    if choices is not None and v not in choices:
        problems.add(f"{path}.{key}", v, f"one of {', '.join(choices)}")
        return None
    bad = bad_text(v)
    if bad:
        problems.add(f"{path}.{key}", v, f"a text without {bad}")
        return None
    return v


def bad_text(text: str) -> str:
    """What makes a text unfit for names and reports, or "".  Control characters would reach
    a terminal raw (escape sequences, bells, carriage returns); a lone surrogate (a \\udXXX
    escape without its pair) is not a character and cannot be written as UTF-8."""
    if _SURROGATE.search(text):
        return "lone surrogate escapes (\\udXXX without its pair)"
    if _CONTROL.search(text):
        return "control characters (line breaks, tabs, escape codes)"
    return ""


_SURROGATE = re.compile("[\ud800-\udfff]")
_CONTROL = re.compile("[\x00-\x1f\x7f-\x9f]")


def boolean(obj: dict, key: str, path: str, problems: Problems, default: Any = MISSING) -> bool | None:
    if key not in obj:
        if default is MISSING:
            problems.add(f"{path}.{key}", MISSING, "true or false")
            return None
        return default
    v = obj[key]
    if not isinstance(v, bool):
        problems.add(f"{path}.{key}", f"<{type_name(v)}>", "true or false")
        return None
    return v


def point(obj: dict, key: str, path: str, problems: Problems, default: Any = MISSING) -> tuple[float, float] | None:
    if key not in obj:
        if default is MISSING:
            problems.add(f"{path}.{key}", MISSING, "a point [x, y] in mm")
            return None
        return default
    return point_value(obj[key], f"{path}.{key}", problems)


def point_value(v: Any, where: str, problems: Problems) -> tuple[float, float] | None:
    expected = f"a point [x, y] of two finite numbers (mm) of magnitude at most {MAX_COORD:g}"
    if not (isinstance(v, list) and len(v) == 2 and all(is_number(c) for c in v)):
        if isinstance(v, list) and len(v) <= 4:
            found = "<[" + ", ".join(type_name(c) for c in v) + "]>"
        else:
            found = f"<{type_name(v)}>"
        problems.add(where, found, expected)
        return None
    if any(abs(c) > MAX_COORD for c in v):
        problems.add(where, v, expected)
        return None
    return (float(v[0]), float(v[1]))


def obj(value: Any, where: str, problems: Problems) -> dict | None:
    if not isinstance(value, dict):
        problems.add(where, f"<{type_name(value)}>", "an object {...}")
        return None
    return value


def array(value: Any, where: str, problems: Problems) -> list | None:
    if not isinstance(value, list):
        problems.add(where, f"<{type_name(value)}>", "a list [...]")
        return None
    return value

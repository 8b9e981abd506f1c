"""A small arithmetic language for linked numbers in scene files; never Python's eval.

    expression := sum
    sum        := product (("+" | "-") product)*
    product    := unary (("*" | "/") unary)*
    unary      := ("+" | "-") unary | power
    power      := atom ("**" unary)?                  right-associative, binds tighter than unary
    atom       := NUMBER | "(" sum ")" | FUNCTION "(" sum ("," sum)* ")" | reference
    reference  := NAME ("[" WHOLE "]")? ("." NAME)*   NAME: a word, or any text in 'single quotes'

So `-2 ** 2` is -4, as in ordinary mathematics.  Angles of the trigonometric functions are in
radians, as in every maths library: write `sin(radians(30))` for degrees.  A reference names a
number of the scene (`radius`) or a value a part exposes (`guide.output_x`, `sheet[3].apex_y`,
`'roof prism'.apex_x`); what it means is up to the caller's lookup function.

`parse(text)` gives a tree (nested tuples) and raises ExpressionError with a message a user can
read; `evaluate(tree, lookup)` computes it, calling `lookup(Reference)` for every reference.
"""
from __future__ import annotations

import math
import re
from dataclasses import dataclass
from typing import Callable

MAX_LENGTH = 2000   # characters: an expression in a scene file is a line, not a program
MAX_DEPTH = 60      # nesting of brackets and operators


class ExpressionError(ValueError):
    """An expression that cannot be read or computed; the message says what was expected."""


@dataclass(frozen=True)
class Reference:
    """A name in an expression: `base`, an optional instance `index`, then `.attribute`s."""

    base: str
    index: int | None = None
    attrs: tuple[str, ...] = ()

    def __str__(self) -> str:
        base = self.base if re.fullmatch(r"[A-Za-z_]\w*", self.base) else f"'{self.base}'"
        index = f"[{self.index}]" if self.index is not None else ""
        return base + index + "".join("." + (a if re.fullmatch(r"[A-Za-z_]\w*", a) else f"'{a}'")
                                      for a in self.attrs)


def _asin(x: float) -> float:
    if not -1.0 <= x <= 1.0:
        raise ExpressionError(f"asin of {x!r}: expected an argument between -1 and 1")
    return math.asin(x)


def _acos(x: float) -> float:
    if not -1.0 <= x <= 1.0:
        raise ExpressionError(f"acos of {x!r}: expected an argument between -1 and 1")
    return math.acos(x)


def _sqrt(x: float) -> float:
    if x < 0:
        raise ExpressionError(f"sqrt of {x!r}: expected an argument of at least 0")
    return math.sqrt(x)


# name -> (function, number of arguments or None for one or more)
FUNCTIONS: dict[str, tuple[Callable[..., float], int | None]] = {
    "sin": (math.sin, 1), "cos": (math.cos, 1), "tan": (math.tan, 1),
    "asin": (_asin, 1), "acos": (_acos, 1), "atan": (math.atan, 1), "atan2": (math.atan2, 2),
    "sqrt": (_sqrt, 1), "abs": (abs, 1), "radians": (math.radians, 1),
    "degrees": (math.degrees, 1), "min": (min, None), "max": (max, None),
}
CONSTANTS = {"pi": math.pi}
RESERVED = frozenset(FUNCTIONS) | frozenset(CONSTANTS)

_TOKENS = re.compile(r"""
    \s*(?:
      (?P<number>(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)
    | (?P<name>[A-Za-z_]\w*)
    | '(?P<quoted>[^']*)'
    | (?P<op>\*\*|[-+*/(),.\[\]])
    )""", re.VERBOSE)


def _tokenize(text: str) -> list[tuple[str, str, int]]:
    tokens, pos = [], 0
    while pos < len(text):
        if text[pos:].strip() == "":
            break
        m = _TOKENS.match(text, pos)
        if not m:
            rest = text[pos:].lstrip()
            col = len(text) - len(rest) + 1
            hint = "an unclosed quote" if rest.startswith("'") else f"{rest[0]!r}"
            raise ExpressionError(f"{hint} at character {col}: expected a number, a name, "
                                  "+ - * / ** ( ) or a function call")
        kind = m.lastgroup
        tokens.append((kind, m.group(kind), m.start(kind) + 1))
        pos = m.end()
    tokens.append(("end", "", len(text) + 1))
    return tokens


class _Parser:
    def __init__(self, text: str):
        self.tokens = _tokenize(text)
        self.i = 0
        self.depth = 0

    def peek(self, value: str | None = None, kind: str | None = None) -> bool:
        k, v, _ = self.tokens[self.i]
        return (kind is None or k == kind) and (value is None or v == value)

    def take(self) -> tuple[str, str, int]:
        tok = self.tokens[self.i]
        self.i += 1
        return tok

    def expect(self, value: str, what: str) -> None:
        if not self.peek(value):
            self.fail(what)
        self.take()

    def fail(self, expected: str):
        kind, value, col = self.tokens[self.i]
        found = "the end" if kind == "end" else f"{value!r} at character {col}"
        raise ExpressionError(f"found {found}: expected {expected}")

    def nested(self):
        self.depth += 1
        if self.depth > MAX_DEPTH:
            raise ExpressionError(f"brackets or operators nested more than {MAX_DEPTH} deep")

    def sum(self):
        self.nested()
        node = self.product()
        while self.peek("+") or self.peek("-"):
            op = self.take()[1]
            node = (op, node, self.product())
        self.depth -= 1
        return node

    def product(self):
        node = self.unary()
        while self.peek("*") or self.peek("/"):
            op = self.take()[1]
            node = (op, node, self.unary())
        return node

    def unary(self):
        if self.peek("-") or self.peek("+"):
            op = self.take()[1]
            self.nested()
            node = self.unary()
            self.depth -= 1
            return ("neg", node) if op == "-" else node
        return self.power()

    def power(self):
        node = self.atom()
        if self.peek("**"):
            self.take()
            self.nested()
            node = ("**", node, self.unary())
            self.depth -= 1
        return node

    def atom(self):
        kind, value, _ = self.tokens[self.i]
        if kind == "number":
            self.take()
            return ("num", float(value))
        if value == "(":
            self.take()
            node = self.sum()
            self.expect(")", "a closing )")
            return node
        if kind == "name" and value in FUNCTIONS and self.tokens[self.i + 1][1] == "(":
            return self.call()
        if kind in ("name", "quoted"):
            return self.reference()
        self.fail("a number, a name, a function call or (")

    def call(self):
        name = self.take()[1]
        self.take()   # "("
        args = [self.sum()]
        while self.peek(","):
            self.take()
            args.append(self.sum())
        self.expect(")", f"a closing ) after the arguments of {name}")
        arity = FUNCTIONS[name][1]
        if arity is not None and len(args) != arity:
            raise ExpressionError(f"{name} takes {arity} argument{'s' if arity > 1 else ''}, "
                                  f"found {len(args)}")
        return ("call", name, tuple(args))

    def reference(self):
        kind, value, _ = self.take()
        if kind == "name" and value in CONSTANTS and not self.peek("[") and not self.peek("."):
            return ("num", CONSTANTS[value])
        if kind == "name" and value in FUNCTIONS:
            raise ExpressionError(f"{value} is a function: expected {value}(...)")
        if self.peek("("):
            raise ExpressionError(f"{value} is not a function: expected one of "
                                  + ", ".join(sorted(FUNCTIONS)))
        index = None
        if self.peek("["):
            self.take()
            if not self.peek(kind="number") or not self.tokens[self.i][1].isdigit():
                self.fail("a whole number (the copy of a repeated part, from 0)")
            index = int(self.take()[1])
            self.expect("]", "a closing ]")
        attrs = []
        while self.peek("."):
            self.take()
            if not (self.peek(kind="name") or self.peek(kind="quoted")):
                self.fail("a name after the dot, such as output_x or 'right leg'")
            attrs.append(self.take()[1])
        return ("ref", Reference(value, index, tuple(attrs)))


def parse(text: str):
    """The tree of `text`; raises ExpressionError naming what was expected and where."""
    if not isinstance(text, str):
        raise ExpressionError(f"an expression must be text, found {text!r}")
    if len(text) > MAX_LENGTH:
        raise ExpressionError(f"an expression of {len(text)} characters: expected at most {MAX_LENGTH}")
    if not text.strip():
        raise ExpressionError("an empty expression: expected a number or a formula such as 2 * radius")
    p = _Parser(text)
    node = p.sum()
    if not p.peek(kind="end"):
        p.fail("an operator (+ - * / **) or the end of the expression")
    return node


def references(node) -> list[Reference]:
    """Every reference in a tree, in reading order."""
    out: list[Reference] = []

    def walk(n):
        if n[0] == "ref":
            out.append(n[1])
        elif n[0] == "call":
            for a in n[2]:
                walk(a)
        elif n[0] != "num":
            for a in n[1:]:
                walk(a)
    walk(node)
    return out


def evaluate(node, lookup: Callable[[Reference], float]) -> float:
    """The value of a tree; `lookup` gives the value of each reference (and may raise
    ExpressionError).  A result or step that is not a finite number is an ExpressionError."""
    try:
        value = _eval(node, lookup)
    except ZeroDivisionError:
        raise ExpressionError("a division by zero") from None
    except OverflowError:
        raise ExpressionError("a result too large for a number") from None
    except (ValueError, TypeError) as exc:
        if isinstance(exc, ExpressionError):
            raise
        raise ExpressionError(f"a step with no real result ({exc})") from None
    if not math.isfinite(value):
        raise ExpressionError(f"a result of {value!r}: expected a finite number")
    return value


def _eval(n, lookup) -> float:
    tag = n[0]
    if tag == "num":
        return n[1]
    if tag == "ref":
        return float(lookup(n[1]))
    if tag == "neg":
        return -_eval(n[1], lookup)
    if tag == "call":
        f = FUNCTIONS[n[1]][0]
        return float(f(*(_eval(a, lookup) for a in n[2])))
    a, b = _eval(n[1], lookup), _eval(n[2], lookup)
    if tag == "+":
        return a + b
    if tag == "-":
        return a - b
    if tag == "*":
        return a * b
    if tag == "/":
        return a / b
    result = a ** b
    if isinstance(result, complex):
        raise ExpressionError(f"{a!r} ** {b!r} has no real value")
    return float(result)

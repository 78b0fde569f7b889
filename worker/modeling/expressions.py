"""The expression language: a tokenizer and a Pratt parser producing a small syntax tree.

User text is only ever read by this parser; nothing here hands it to Python. Depth and length are
bounded here so that a hostile expression cannot exhaust the interpreter's recursion limit.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

MAX_LENGTH = 10_000
MAX_DEPTH = 64

ELEMENTWISE_FUNCTIONS = frozenset(
    {
        "exp", "log", "log1p", "expm1", "sqrt", "square", "abs", "logistic", "logit",
        "softplus", "sin", "cos", "tanh", "lgamma",
    }
)
REDUCING_FUNCTIONS = frozenset({"sum", "mean"})
VECTOR_FUNCTIONS = frozenset({"softmax", "log_softmax", "running_sum"})
FUNCTIONS = ELEMENTWISE_FUNCTIONS | REDUCING_FUNCTIONS | VECTOR_FUNCTIONS | {"dot", "select"}
COMPARISONS = frozenset({"<", "<=", ">", ">=", "==", "!="})


class ExpressionError(ValueError):
    """A problem in one expression, with the 0-based character position where it was found."""

    def __init__(self, message: str, position: int):
        super().__init__(message)
        self.message = message
        self.position = position


@dataclass(frozen=True)
class Number:
    value: float
    is_integer: bool
    position: int


@dataclass(frozen=True)
class Name:
    name: str
    position: int


@dataclass(frozen=True)
class Unary:
    operator: str
    operand: Node
    position: int


@dataclass(frozen=True)
class Binary:
    operator: str  # + - * / ^ @ or a comparison
    left: Node
    right: Node
    position: int


@dataclass(frozen=True)
class Call:
    function: str
    arguments: tuple[Node, ...]
    position: int


@dataclass(frozen=True)
class Index:
    target: Node
    indices: tuple[Node, ...]
    position: int


@dataclass(frozen=True)
class VectorLiteral:
    items: tuple[Node, ...]
    position: int


@dataclass(frozen=True)
class MatrixLiteral:
    rows: tuple[tuple[Node, ...], ...]
    position: int


Node = Number | Name | Unary | Binary | Call | Index | VectorLiteral | MatrixLiteral


@dataclass(frozen=True)
class Token:
    kind: str  # "number", "name", "op", "end"
    text: str
    position: int


_NUMBER = re.compile(r"(?:\d+\.\d*|\.\d+|\d+)(?:[eE][+-]?\d+)?")
_NAME = re.compile(r"[A-Za-z_][A-Za-z0-9_]*")
_OPERATORS = ("<=", ">=", "==", "!=", "+", "-", "*", "/", "^", "@", "(", ")", "[", "]", ",",
              "<", ">")
# Characters that suggest an attempt at some other language's syntax get a specific explanation.
_FORBIDDEN = {
    ".": "attribute access ('.') is not allowed",
    "=": "keyword arguments and assignment ('=') are not allowed",
    "'": "strings are not allowed",
    '"': "strings are not allowed",
    ":": "slices and lambda-like syntax (':') are not allowed",
    "{": "braces are not allowed",
    "}": "braces are not allowed",
    ";": "only one expression is allowed (';' found)",
    "#": "comments are not allowed",
    "\\": "backslashes are not allowed",
    "`": "backquotes are not allowed",
    "%": "the '%' operator is not part of the language",
    "&": "use select(condition, a, b) instead of '&'",
    "|": "use select(condition, a, b) instead of '|'",
    "!": "use select(condition, a, b) instead of '!'",
    "~": "the '~' operator is not part of the language",
}


def tokenize(text: str) -> list[Token]:
    """Split an expression into tokens, rejecting anything outside the language."""
    if len(text) > MAX_LENGTH:
        raise ExpressionError(
            f"the expression is {len(text)} characters long; the limit is {MAX_LENGTH}", 0
        )
    tokens: list[Token] = []
    i, n = 0, len(text)
    while i < n:
        c = text[i]
        if c in " \t\r\n":
            i += 1
            continue
        # ASCII only: str.isdigit and str.isalpha also accept letters and digits of other scripts
        # ("²", "٣"), which the number and name patterns do not match.
        if (c.isascii() and c.isdigit()) or (
                c == "." and i + 1 < n and text[i + 1].isascii() and text[i + 1].isdigit()):
            m = _NUMBER.match(text, i)
            assert m is not None
            end = m.end()
            if end < n and (text[end] == "." or text[end].isalpha() or text[end] == "_"):
                raise ExpressionError(f"malformed number near '{text[i:end + 1]}'", i)
            tokens.append(Token("number", m.group(), i))
            i = end
            continue
        if (c.isascii() and c.isalpha()) or c == "_":
            m = _NAME.match(text, i)
            assert m is not None
            word = m.group()
            if word.startswith("_"):
                raise ExpressionError(f"names may not begin with an underscore ('{word}')", i)
            tokens.append(Token("name", word, i))
            i = m.end()
            continue
        if text.startswith("**", i):
            raise ExpressionError("use '^' for powers ('**' is not part of the language)", i)
        for op in _OPERATORS:
            if text.startswith(op, i):
                tokens.append(Token("op", op, i))
                i += len(op)
                break
        else:
            reason = _FORBIDDEN.get(c, f"the character {c!r} is not part of the language")
            raise ExpressionError(reason, i)
    tokens.append(Token("end", "", n))
    return tokens


# Binding powers: comparisons < additive < multiplicative (and @) < unary minus < power < postfix.
_INFIX = {
    "<": 10, "<=": 10, ">": 10, ">=": 10, "==": 10, "!=": 10,
    "+": 20, "-": 20,
    "*": 30, "/": 30, "@": 30,
    "^": 50,
}
_UNARY_POWER = 40


class _Parser:
    def __init__(self, text: str):
        self.tokens = tokenize(text)
        self.i = 0
        self.depth = 0

    def peek(self) -> Token:
        return self.tokens[self.i]

    def advance(self) -> Token:
        token = self.tokens[self.i]
        self.i += 1
        return token

    def expect(self, text: str) -> Token:
        token = self.peek()
        if token.kind != "op" or token.text != text:
            found = "the end of the expression" if token.kind == "end" else f"'{token.text}'"
            raise ExpressionError(f"expected '{text}' but found {found}", token.position)
        return self.advance()

    def enter(self, position: int) -> None:
        self.depth += 1
        if self.depth > MAX_DEPTH:
            raise ExpressionError(
                f"the expression is nested more than {MAX_DEPTH} levels deep", position
            )

    def parse(self) -> Node:
        node = self.expression(0, allow_comparison=False)
        token = self.peek()
        if token.kind != "end":
            raise ExpressionError(f"unexpected '{token.text}' after a complete expression",
                                  token.position)
        return node

    def expression(self, min_power: int, allow_comparison: bool) -> Node:
        self.enter(self.peek().position)
        left = self.prefix(allow_comparison)
        while True:
            token = self.peek()
            if token.kind != "op" or token.text not in _INFIX:
                break
            power = _INFIX[token.text]
            if power <= min_power:
                break
            if token.text in COMPARISONS:
                if not allow_comparison:
                    raise ExpressionError(
                        "comparisons are allowed only as the condition of select(condition, a, b)",
                        token.position,
                    )
                if isinstance(left, Binary) and left.operator in COMPARISONS:
                    raise ExpressionError("comparisons cannot be chained", token.position)
            self.advance()
            # '^' is right-associative: parse its right side at one less binding power.
            right_power = power - 1 if token.text == "^" else power
            right = self.expression(right_power, allow_comparison=False)
            left = Binary(token.text, left, right, token.position)
        self.depth -= 1
        return left

    def prefix(self, allow_comparison: bool) -> Node:
        token = self.advance()
        if token.kind == "number":
            text = token.text
            is_integer = text.isdigit()
            return self.postfix(Number(float(text), is_integer, token.position))
        if token.kind == "name":
            nxt = self.peek()
            if nxt.kind == "op" and nxt.text == "(":
                return self.postfix(self.call(token))
            return self.postfix(Name(token.text, token.position))
        if token.kind == "op":
            if token.text == "-":
                operand = self.expression(_UNARY_POWER, allow_comparison=False)
                return Unary("-", operand, token.position)
            if token.text == "+":
                return self.expression(_UNARY_POWER, allow_comparison=False)
            if token.text == "(":
                inner = self.expression(0, allow_comparison)
                self.expect(")")
                return self.postfix(inner)
            if token.text == "[":
                return self.postfix(self.literal(token))
            raise ExpressionError(f"unexpected '{token.text}'", token.position)
        raise ExpressionError("the expression ends too early", token.position)

    def call(self, name: Token) -> Node:
        if name.text not in FUNCTIONS:
            allowed = ", ".join(sorted(FUNCTIONS))
            raise ExpressionError(
                f"'{name.text}' is not a function of the language; the functions are {allowed}",
                name.position,
            )
        self.expect("(")
        arguments: list[Node] = []
        if not (self.peek().kind == "op" and self.peek().text == ")"):
            while True:
                first_of_select = name.text == "select" and not arguments
                arguments.append(self.expression(0, allow_comparison=first_of_select))
                if self.peek().kind == "op" and self.peek().text == ",":
                    self.advance()
                    continue
                break
        self.expect(")")
        return Call(name.text, tuple(arguments), name.position)

    def postfix(self, node: Node) -> Node:
        while self.peek().kind == "op" and self.peek().text in ("[", "("):
            token = self.advance()
            if token.text == "(":
                raise ExpressionError("only the listed functions can be called", token.position)
            self.enter(token.position)
            indices = [self.expression(0, allow_comparison=False)]
            while self.peek().kind == "op" and self.peek().text == ",":
                self.advance()
                indices.append(self.expression(0, allow_comparison=False))
            self.expect("]")
            self.depth -= 1
            if len(indices) > 2:
                raise ExpressionError("at most two indices are allowed (row, column)",
                                      token.position)
            node = Index(node, tuple(indices), token.position)
        return node

    def literal(self, opening: Token) -> Node:
        """A vector literal [a, b] or a matrix literal [[a, b], [c, d]]; '[' is already read."""
        self.enter(opening.position)
        if self.peek().kind == "op" and self.peek().text == "[":
            rows: list[tuple[Node, ...]] = []
            while True:
                row_open = self.expect("[")
                self.enter(row_open.position)
                rows.append(tuple(self.items()))
                self.depth -= 1
                self.expect("]")
                if self.peek().kind == "op" and self.peek().text == ",":
                    self.advance()
                    continue
                break
            self.expect("]")
            self.depth -= 1
            return MatrixLiteral(tuple(rows), opening.position)
        items = self.items()
        self.expect("]")
        self.depth -= 1
        return VectorLiteral(tuple(items), opening.position)

    def items(self) -> list[Node]:
        if self.peek().kind == "op" and self.peek().text == "]":
            raise ExpressionError("empty brackets", self.peek().position)
        items = [self.expression(0, allow_comparison=False)]
        while self.peek().kind == "op" and self.peek().text == ",":
            self.advance()
            items.append(self.expression(0, allow_comparison=False))
        return items


def parse(text: str) -> Node:
    """Parse one expression string into a syntax tree; raises ExpressionError."""
    if not isinstance(text, str):
        raise ExpressionError("an expression must be a string", 0)
    return _Parser(text).parse()


def names_in(node: Node) -> set[str]:
    """Every name the expression refers to (iteratively, so depth cannot matter)."""
    found: set[str] = set()
    stack: list[Node] = [node]
    while stack:
        n = stack.pop()
        if isinstance(n, Name):
            found.add(n.name)
        stack.extend(children(n))
    return found


def matrix_product_partners(node: Node, name: str) -> list[str | None]:
    """For every occurrence of `name`: the name M when it occurs as `M @ name` with M a plain
    name, else None (any other use)."""
    partners: list[str | None] = []
    stack: list[Node] = [node]
    while stack:
        n = stack.pop()
        if isinstance(n, Binary) and n.operator == "@" and isinstance(n.right, Name) \
                and n.right.name == name and isinstance(n.left, Name):
            partners.append(n.left.name)
            continue
        if isinstance(n, Name) and n.name == name:
            partners.append(None)
        stack.extend(children(n))
    return partners


def children(node: Node) -> list[Node]:
    """The direct sub-expressions of a node, in source order."""
    if isinstance(node, Unary):
        return [node.operand]
    if isinstance(node, Binary):
        return [node.left, node.right]
    if isinstance(node, Call):
        return list(node.arguments)
    if isinstance(node, Index):
        return [node.target, *node.indices]
    if isinstance(node, VectorLiteral):
        return list(node.items)
    if isinstance(node, MatrixLiteral):
        return [item for row in node.rows for item in row]
    return []

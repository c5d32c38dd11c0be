"""Parse Stan program text into a lark syntax tree, with plain-words syntax errors.

The grammar is ``stan.lark`` beside this module, parsed with LALR(1) and lark's
contextual lexer (fast: a few milliseconds for a 200-line program). Every tree node
keeps its line and column (``propagate_positions``).
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass
from functools import cache
from pathlib import Path

from lark import Lark, Token, Tree
from lark.exceptions import UnexpectedCharacters, UnexpectedEOF, UnexpectedInput, UnexpectedToken

_GRAMMAR = Path(__file__).with_name("stan.lark")

#: What a regex terminal means, in words.
_REGEX_WORDS = {
    "IDENT": "a name",
    "INT": "a number",
    "REAL": "a number",
    "IMAG": "a number",
    "STRING": "a string",
    "CONSTRAINT_KEY": "lower, upper, offset or multiplier",
    "$END": "the end of the program",
}

_TYPE_WORDS = {
    "int", "real", "complex", "vector", "row_vector", "matrix", "complex_vector",
    "complex_row_vector", "complex_matrix", "simplex", "ordered", "positive_ordered",
    "unit_vector", "sum_to_zero_vector", "sum_to_zero_matrix", "cholesky_factor_corr",
    "cholesky_factor_cov", "corr_matrix", "cov_matrix", "column_stochastic_matrix",
    "row_stochastic_matrix", "array", "tuple",
}
_STATEMENT_WORDS = {
    "for", "while", "if", "break", "continue", "return", "print", "reject",
    "fatal_error", "profile",
}
_BLOCK_WORDS = {"functions", "data", "transformed", "parameters", "model", "generated"}
_EXPRESSION_STARTS = {"IDENT", "INT", "REAL", "IMAG", "(", "[", "{", "-", "+", "!", "target"}


@dataclass
class StanSyntaxError(Exception):
    """A syntax error at a 1-based line and column of the parsed text."""

    message: str
    line: int
    column: int

    def __str__(self) -> str:
        return f"{self.line}:{self.column}: {self.message}"


@cache
def _parser() -> Lark:
    return Lark(
        _GRAMMAR.read_text(encoding="utf-8"),
        parser="lalr",
        lexer="contextual",
        propagate_positions=True,
        maybe_placeholders=True,
    )


def parse_stan(text: str) -> Tree:
    """Parse a whole Stan program.

    Raises
    ------
    StanSyntaxError
        With a message in plain words and the position of the offending token.
    """
    parser = _parser()
    try:
        return parser.parse(text)
    except UnexpectedInput as exc:
        raise _explain(exc, parser, text) from None


def _explain(exc: UnexpectedInput, parser: Lark, text: str) -> StanSyntaxError:
    pos = getattr(exc, "pos_in_stream", None)
    if pos is None and isinstance(exc, UnexpectedToken):
        pos = exc.token.start_pos
    if pos is not None and text.startswith("/*", pos):
        return StanSyntaxError("a comment opened with /* is never closed by */",
                               exc.line or 1, exc.column or 1)
    if isinstance(exc, UnexpectedCharacters):
        word = _word_around(text, exc.pos_in_stream)
        if word is not None:
            # `transformed_parameters`: a keyword was read, then '_' did not fit.
            start, name = word
            allowed = _accepts_at(parser, text, start) or set(exc.allowed or ())
            message = (f"unexpected name '{name}' — expected "
                       f"{_describe_expected(allowed, parser)}")
            message += _did_you_mean(name, allowed, parser)
            return StanSyntaxError(message, exc.line, exc.column - (exc.pos_in_stream - start))
        char = exc.char
        what = "an unterminated string" if char == '"' else f"unexpected character {char!r}"
        return StanSyntaxError(what, exc.line, exc.column)
    if isinstance(exc, UnexpectedToken):
        token = exc.token
        # ``accepts`` re-runs the parser to list what is really allowed here;
        # ``expected`` can be wider because LALR merges states.
        try:
            allowed = exc.accepts or exc.expected
        except Exception:  # noqa: BLE001 - only a better message is at stake
            allowed = exc.expected
        expected = _describe_expected(allowed, parser)
        if token.type == "$END":
            line, column = _end_position(exc)
            return StanSyntaxError(f"unexpected end of the program — expected {expected}",
                                   line, column)
        message = f"unexpected {_describe_token(token)} — expected {expected}"
        if token.type == "IDENT":
            message += _did_you_mean(str(token.value), allowed, parser)
        previous = (exc.token_history or [None])[-1]
        semicolon_allowed = any(
            t.name in allowed and t.pattern.value == ";" for t in parser.terminals)
        if (semicolon_allowed and previous is not None and previous.end_line
                and token.line and token.line > previous.end_line):
            # A missing ';' is noticed on the next line; point at where it belongs.
            return StanSyntaxError(
                f"missing ';' after '{previous.value}' (the next {_describe_token(token)} "
                f"is on a later line)",
                previous.end_line, previous.end_column)
        return StanSyntaxError(message, token.line or 1, token.column or 1)
    if isinstance(exc, UnexpectedEOF):
        expected = _describe_expected(set(exc.expected), parser)
        return StanSyntaxError(f"unexpected end of the program — expected {expected}", 1, 1)
    return StanSyntaxError(str(exc).splitlines()[0], exc.line or 1, exc.column or 1)


def _accepts_at(parser: Lark, text: str, pos: int) -> set[str]:
    """Terminals the grammar accepts at ``pos``, found by parsing the text before it."""
    try:
        interactive = parser.parse_interactive(text[:pos])
        interactive.exhaust_lexer()
        return set(interactive.accepts())
    except Exception:  # noqa: BLE001 - only a better message is at stake
        return set()


def _word_around(text: str, pos: int) -> tuple[int, str] | None:
    """(start, word) of an identifier-like word that ``pos`` falls inside, if any."""
    ident = set("abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ0123456789_")
    if pos >= len(text) or text[pos] not in ident:
        return None
    start, end = pos, pos
    while start > 0 and text[start - 1] in ident:
        start -= 1
    while end < len(text) and text[end] in ident:
        end += 1
    word = text[start:end]
    if start == pos or not word[0].isalpha():
        return None
    return start, word


def _did_you_mean(word: str, allowed: set[str] | frozenset[str], parser: Lark) -> str:
    """`` (did you mean 'parameters'?)`` when a keyword allowed here is spelled close."""
    keywords = [t.pattern.value for t in parser.terminals
                if t.name in allowed and t.pattern.type == "str" and t.pattern.value.isalpha()]
    if any(t.name == "CONSTRAINT_KEY" for t in parser.terminals if t.name in allowed):
        keywords += ["lower", "upper", "offset", "multiplier"]
    # Two-word block names are typed as one word or with an underscore.
    keywords += [k for k in ("transformed data", "transformed parameters",
                             "generated quantities") if k.split()[0] in keywords]
    close = difflib.get_close_matches(word.replace("_", " "), keywords, n=1, cutoff=0.75)
    return f" (did you mean '{close[0]}'?)" if close and close[0] != word else ""


def _end_position(exc: UnexpectedToken) -> tuple[int, int]:
    # lark gives $END the position of the last token seen; point just after it.
    token = exc.token
    line = getattr(token, "end_line", None) or token.line or 1
    column = getattr(token, "end_column", None) or token.column or 1
    return int(line), int(column)


def _describe_token(token: Token) -> str:
    if token.type == "IDENT":
        return f"name '{token.value}'"
    if token.type in {"INT", "REAL", "IMAG"}:
        return f"number {token.value}"
    if token.type == "STRING":
        return "string"
    return f"token '{token.value}'"


def _describe_expected(names: set[str] | frozenset[str], parser: Lark) -> str:
    """Turn lark's expected terminal names into a short phrase."""
    literal: dict[str, str] = {}
    for term in parser.terminals:
        if term.pattern.type == "str":
            literal[term.name] = term.pattern.value
    values = {literal.get(n, n) for n in names}
    words: list[str] = []
    if "IDENT" in values and ("INT" in values or "REAL" in values):
        words.append("an expression")
        values -= _EXPRESSION_STARTS
    if values & _BLOCK_WORDS and "model" in values:
        words.append("a program block (data, parameters, model ...)")
        values -= _BLOCK_WORDS
    if values & _STATEMENT_WORDS and "for" in values:
        words.append("a statement")
        values -= _STATEMENT_WORDS | {"target", "~", ";"}
    if len(values & _TYPE_WORDS) > 3:
        words.append("a type")
        values -= _TYPE_WORDS
    if "IDENT" in values and "an expression" not in words:
        words.append("a name")
        values.discard("IDENT")
    if "lower" in values or "CONSTRAINT_KEY" in values:
        values -= {"lower", "upper", "offset", "multiplier"}
        values.add("CONSTRAINT_KEY")
    if len(values & {"=", "+=", "-=", "*=", "/=", ".*=", "./=", "<-"}) > 1:
        words.append("an assignment")
        values -= {"=", "+=", "-=", "*=", "/=", ".*=", "./=", "<-"}
    if len(values) > 8:
        # Operators after a complete expression: naming all of them helps nobody.
        ops = {v for v in values if not v.isalnum() and v not in {";", ")", "]", "}", ","}}
        if len(ops) > 4:
            words.append("an operator")
            values -= ops
    rest = sorted(values, key=lambda v: (v not in {";", ")", "]", "}", ","}, v))
    for v in rest:
        word = _REGEX_WORDS.get(v)
        words.append(word if word else f"'{v}'")
    words = list(dict.fromkeys(words))
    if not words:
        return "something else"
    if len(words) == 1:
        return words[0]
    return ", ".join(words[:-1]) + " or " + words[-1]

"""Row filters written in the usual GIS attribute-query syntax, turned into a boolean mask without evaluating code.

Accepted: comparisons ``=`` (also ``==``), ``<>`` (also ``!=``), ``<``, ``<=``, ``>``, ``>=``; ``AND``, ``OR``,
``NOT``; ``IN (...)``, ``BETWEEN a AND b``, ``LIKE`` (``%`` any run, ``_`` one character, case-insensitive),
``IS NULL``, ``IS NOT NULL``; parentheses; numbers, 'quoted strings' (``''`` for a quote inside) and field names
(bare, or "double quoted" when they hold spaces). Keywords are case-insensitive.

Semantics follow SQL (ISO/IEC 9075): a comparison with a missing value is unknown, ``AND``/``OR``/``NOT`` use
three-valued logic, and a row is kept only when the condition is true. A blank text value counts as missing, since
a CSV has no other way to write NULL. A text field compared with a number is compared as a number where its text is
one (the usual case of ids read as text); text that is not a number is unequal to every number.

The text is tokenised and parsed by recursive descent into a small tree, then evaluated with vectorised pandas
operations; nothing of the user's text is passed to ``eval`` or ``DataFrame.query``.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np
import pandas as pd

from coverkit.errors import FieldError

_EXAMPLE = "e.g. priority = 1 AND type IN ('fire', 'ems')"
_KEYWORDS = {"AND", "OR", "NOT", "IN", "LIKE", "IS", "NULL", "BETWEEN"}
_TOKEN = re.compile(
    r"""
    (?P<space>\s+)
  | (?P<number>(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)
  | (?P<string>'(?:[^']|'')*')
  | (?P<quoted>"(?:[^"]|"")*")
  | (?P<name>[A-Za-z_][A-Za-z0-9_.]*)
  | (?P<op><>|!=|<=|>=|==|=|<|>)
  | (?P<punct>[(),\-+])
    """,
    re.VERBOSE,
)


@dataclass(frozen=True)
class _Tok:
    kind: str  # number, string, field, qfield (double-quoted field), op, punct, kw, end
    value: object
    pos: int  # 1-based character position in the filter text


class _Syntax(Exception):
    def __init__(self, pos: int, what: str) -> None:
        super().__init__(what)
        self.pos = pos
        self.what = what


def _tokens(text: str) -> list[_Tok]:
    out: list[_Tok] = []
    i = 0
    while i < len(text):
        m = _TOKEN.match(text, i)
        if not m:
            if text[i] in "'\"":
                raise _Syntax(i + 1, f"a quote {text[i]} that is never closed")
            if text[i] in "&|":
                raise _Syntax(i + 1, f"'{text[i]}' is not an operator here; write {'AND' if text[i] == '&' else 'OR'}")
            raise _Syntax(i + 1, f"unexpected character '{text[i]}'")
        kind, raw = m.lastgroup, m.group()
        if kind == "number":
            out.append(_Tok("number", float(raw) if any(c in raw for c in ".eE") else int(raw), i + 1))
        elif kind == "string":
            out.append(_Tok("string", raw[1:-1].replace("''", "'"), i + 1))
        elif kind == "quoted":
            out.append(_Tok("qfield", raw[1:-1].replace('""', '"'), i + 1))
        elif kind == "name":
            up = raw.upper()
            out.append(_Tok("kw", up, i + 1) if up in _KEYWORDS else _Tok("field", raw, i + 1))
        elif kind == "op":
            out.append(_Tok("op", {"==": "=", "!=": "<>"}.get(raw, raw), i + 1))
        elif kind == "punct":
            out.append(_Tok("punct", raw, i + 1))
        i = m.end()
    out.append(_Tok("end", None, len(text) + 1))
    return out


# The tree: tuples ("or", a, b), ("and", a, b), ("not", a), ("cmp", op, left, right), ("in", operand, values, negated),
# ("between", operand, lo, hi, negated), ("like", operand, pattern, negated), ("null", operand, negated);
# operands are ("field", name, position, double-quoted) or ("lit", value).


class _Parser:
    def __init__(self, toks: list[_Tok]) -> None:
        self.toks = toks
        self.i = 0

    @property
    def tok(self) -> _Tok:
        return self.toks[self.i]

    def take(self) -> _Tok:
        t = self.toks[self.i]
        self.i += 1
        return t

    def is_kw(self, *words: str) -> bool:
        return self.tok.kind == "kw" and self.tok.value in words

    def expect(self, kind: str, value: object, what: str) -> None:
        if self.tok.kind != kind or self.tok.value != value:
            raise _Syntax(self.tok.pos, f"expected {what}, found {_show(self.tok)}")
        self.take()

    def parse(self) -> tuple:
        if self.tok.kind == "end":
            raise _Syntax(1, "the filter is empty")
        node = self.or_expr()
        if self.tok.kind != "end":
            raise _Syntax(self.tok.pos, f"unexpected {_show(self.tok)}")
        return node

    def or_expr(self) -> tuple:
        node = self.and_expr()
        while self.is_kw("OR"):
            self.take()
            node = ("or", node, self.and_expr())
        return node

    def and_expr(self) -> tuple:
        node = self.not_expr()
        while self.is_kw("AND"):
            self.take()
            node = ("and", node, self.not_expr())
        return node

    def not_expr(self) -> tuple:
        if self.is_kw("NOT"):
            self.take()
            return ("not", self.not_expr())
        return self.predicate()

    def predicate(self) -> tuple:
        if self.tok.kind == "punct" and self.tok.value == "(":
            # a parenthesis opens a condition here; operands are never parenthesised
            self.take()
            node = self.or_expr()
            self.expect("punct", ")", "')'")
            return node
        left = self.operand()
        tok = self.tok
        if tok.kind == "op":
            self.take()
            right = self.operand(after=tok.value)
            return ("cmp", tok.value, left, right)
        negated = False
        if self.is_kw("IS"):
            self.take()
            if self.is_kw("NOT"):
                self.take()
                negated = True
            self.expect("kw", "NULL", "NULL after IS")
            return ("null", left, negated)
        if self.is_kw("NOT"):
            self.take()
            negated = True
            if not self.is_kw("IN", "LIKE", "BETWEEN"):
                raise _Syntax(self.tok.pos, f"expected IN, LIKE or BETWEEN after NOT, found {_show(self.tok)}")
        if self.is_kw("IN"):
            self.take()
            self.expect("punct", "(", "'(' after IN")
            values = [self.literal("a value in the IN list")]
            while self.tok.kind == "punct" and self.tok.value == ",":
                self.take()
                values.append(self.literal("a value in the IN list"))
            self.expect("punct", ")", "',' or ')' in the IN list")
            return ("in", left, values, negated)
        if self.is_kw("BETWEEN"):
            self.take()
            lo = self.operand()
            self.expect("kw", "AND", "AND in BETWEEN ... AND ...")
            hi = self.operand()
            return ("between", left, lo, hi, negated)
        if self.is_kw("LIKE"):
            self.take()
            pat = self.literal("a quoted pattern after LIKE")
            if not isinstance(pat, str):
                raise _Syntax(self.toks[self.i - 1].pos, "LIKE needs a quoted pattern, e.g. name LIKE 'MAIN%'")
            return ("like", left, pat, negated)
        if tok.kind == "end":
            raise _Syntax(tok.pos, "the condition ends early; compare the field with a value")
        raise _Syntax(tok.pos, f"expected a comparison (=, <>, <, IN, LIKE, IS NULL ...), found {_show(tok)}")

    def operand(self, after: str | None = None) -> tuple:
        tok = self.tok
        if tok.kind in ("field", "qfield"):
            self.take()
            return ("field", tok.value, tok.pos, tok.kind == "qfield")
        if tok.kind == "kw" and tok.value == "NULL":
            fix = "IS NULL" if after == "=" else "IS NOT NULL" if after == "<>" else "IS NULL or IS NOT NULL"
            raise _Syntax(tok.pos, f"a comparison with NULL is never true; write {fix}")
        return ("lit", self.literal("a field name or a value"))

    def literal(self, what: str) -> object:
        tok = self.tok
        sign = 1
        if tok.kind == "punct" and tok.value in "-+":
            sign = -1 if tok.value == "-" else 1
            self.take()
            tok = self.tok
            if tok.kind != "number":
                raise _Syntax(tok.pos, f"expected a number after the sign, found {_show(tok)}")
        if tok.kind in ("number", "string"):
            self.take()
            return sign * tok.value if tok.kind == "number" else tok.value
        if tok.kind == "kw" and tok.value == "NULL":
            raise _Syntax(tok.pos, "NULL cannot be listed; use IS NULL")
        raise _Syntax(tok.pos, f"expected {what}, found {_show(tok)}")


def _show(tok: _Tok) -> str:
    return "the end of the filter" if tok.kind == "end" else f"'{tok.value}'"


def parse_filter(text: str) -> tuple:
    """Parse a filter into its tree (for checking syntax without data).

    Raises
    ------
    FieldError
        One line with the character position of the syntax error and an example.

    Examples
    --------
    >>> parse_filter("priority = 1")
    ('cmp', '=', ('field', 'priority', 1, False), ('lit', 1))
    """
    try:
        return _Parser(_tokens(text)).parse()
    except _Syntax as exc:
        raise FieldError(f'filter "{text}": syntax error at character {exc.pos}: {exc.what}; {_EXAMPLE}.') from None


def filter_mask(df: pd.DataFrame, text: str, *, source: str = "the data") -> np.ndarray:
    """Rows of ``df`` for which the filter ``text`` is true, as a boolean array.

    Parameters
    ----------
    df
        The table; numeric columns compare as numbers, others as text (blank text is NULL).
    text
        The filter, in the syntax of the module docstring.
    source
        Name of the file, for messages.

    Raises
    ------
    FieldError
        Syntax error (with its character position), an unknown field (naming the fields there are), or a number
        compared with a text that is not a number.

    Examples
    --------
    A blank priority is NULL, so its row is not kept (as in SQL's three-valued logic):

    >>> df = pd.DataFrame({"priority": [1, 2, 1, None], "type": ["fall", "transfer", "fire", "fall"]})
    >>> filter_mask(df, "priority = 1 AND type <> 'transfer'")
    array([ True, False,  True, False])
    """
    tree = parse_filter(text)
    fields = [str(c) for c in df.columns if c != "geometry"]
    ev = _Evaluator(df, fields, text, source)
    value, null = ev.cond(tree)
    return value & ~null


class _Evaluator:
    """Three-valued evaluation: each condition is a pair of arrays (true, unknown)."""

    def __init__(self, df: pd.DataFrame, fields: list[str], text: str, source: str) -> None:
        self.df, self.fields, self.text, self.source = df, fields, text, source
        self.n = len(df)

    def field(self, name: str, pos: int, quoted: bool = False) -> pd.Series:
        if name in self.fields:
            col = name
        else:
            same = [f for f in self.fields if f.lower() == name.lower()]
            if len(same) != 1:
                hint = "; text values go in single quotes, e.g. kind = 'EMS'" if quoted else ""
                raise FieldError(
                    f"filter \"{self.text}\": {self.source} has no field '{name}' (character {pos}); "
                    f"fields: {', '.join(self.fields)}{hint}."
                )
            col = same[0]
        s = self.df[col]
        if s.dtype.kind in "biuf":
            return s.astype(float)
        text = s.astype("string").str.strip()
        return text.mask(text == "")

    def value(self, node: tuple) -> pd.Series | object:
        return self.field(node[1], node[2], node[3]) if node[0] == "field" else node[1]

    def cond(self, node: tuple) -> tuple[np.ndarray, np.ndarray]:
        kind = node[0]
        if kind in ("and", "or"):
            av, an = self.cond(node[1])
            bv, bn = self.cond(node[2])
            if kind == "and":
                false = (~av & ~an) | (~bv & ~bn)
                null = ~false & (an | bn)
                return ~false & ~null, null
            true = av | bv
            null = ~true & (an | bn)
            return true, null
        if kind == "not":
            v, n = self.cond(node[1])
            return ~v & ~n, n
        if kind == "cmp":
            return self.compare(node[1], self.value(node[2]), self.value(node[3]))
        if kind == "null":
            s = self.value(node[1])
            isnull = _as_series(s, self.n).isna().to_numpy()
            return (~isnull if node[2] else isnull), np.zeros(self.n, bool)
        if kind == "in":
            s = self.value(node[1])
            val = np.zeros(self.n, bool)
            null = np.zeros(self.n, bool)
            for lit in node[2]:
                v, n = self.compare("=", s, lit)
                val |= v
                null |= n
            null &= ~val
            return (~val & ~null if node[3] else val), null
        if kind == "between":
            s = self.value(node[1])
            a = self.compare(">=", s, self.value(node[2]))
            b = self.compare("<=", s, self.value(node[3]))
            v, n = self.cond(("and", ("pair", a), ("pair", b)))
            return (~v & ~n if node[4] else v), n
        if kind == "pair":
            return node[1]
        if kind == "like":
            s = _as_series(self.value(node[1]), self.n)
            text = s.astype("string")
            if s.dtype.kind == "f":  # numbers as written (1 not 1.0), as SQL renders an integer
                text = pd.Series([_num_text(x) for x in s], index=s.index, dtype="string")
            regex = "".join(".*" if c == "%" else "." if c == "_" else re.escape(c) for c in node[2])
            hit = text.str.fullmatch(regex, case=False, flags=re.DOTALL)
            null = hit.isna().to_numpy()
            hit = hit.fillna(False).to_numpy(dtype=bool)
            return (~hit & ~null if node[3] else hit), null
        raise AssertionError(kind)  # pragma: no cover - the parser builds only the kinds above

    def compare(self, op: str, a: object, b: object) -> tuple[np.ndarray, np.ndarray]:
        a, b = _as_series(a, self.n), _as_series(b, self.n)
        null = (a.isna() | b.isna()).to_numpy()
        a_num, b_num = a.dtype.kind == "f", b.dtype.kind == "f"
        if a_num != b_num:
            # text against number: compare as numbers where the text is one; other text is unequal to any number
            text = b if a_num else a
            as_num = pd.to_numeric(text, errors="coerce").astype(float)
            comparable = as_num.notna().to_numpy() | null
            if a_num:
                b = as_num
            else:
                a = as_num
            res = _cmp(op, a.to_numpy(dtype=float), b.to_numpy(dtype=float))
            res = np.where(comparable, res, op == "<>")
            return res & ~null, null
        if a_num:
            res = _cmp(op, a.to_numpy(dtype=float), b.to_numpy(dtype=float))
        else:
            ao = a.fillna("").to_numpy(dtype=object)
            bo = b.fillna("").to_numpy(dtype=object)
            res = _cmp(op, ao, bo).astype(bool)
        return res & ~null, null


def _as_series(x: object, n: int) -> pd.Series:
    if isinstance(x, pd.Series):
        return x.reset_index(drop=True)
    if isinstance(x, str):
        return pd.Series([x] * n, dtype="string")
    return pd.Series(np.full(n, float(x)))


def _cmp(op: str, a: np.ndarray, b: np.ndarray) -> np.ndarray:
    with np.errstate(invalid="ignore"):
        if op == "=":
            return a == b
        if op == "<>":
            return a != b
        if op == "<":
            return a < b
        if op == "<=":
            return a <= b
        if op == ">":
            return a > b
        return a >= b


def _num_text(x: float) -> str | None:
    if x != x:
        return None
    return str(int(x)) if float(x).is_integer() else repr(float(x))


__all__ = ["filter_mask", "parse_filter"]

"""A small, safe language for unit-cost expressions over named rasters.

An expression combines named rasters cell by cell into a cost per metre, for
example ``"base + where(wetland > 0, 200, 0)"`` or ``"max(base, 50)"``.  It is
parsed with :func:`ast.parse` in ``eval`` mode and then checked against a
strict whitelist of node types; it is never passed to :func:`eval`.

Grammar (Python's own precedence):

* numbers (``12``, ``0.5``, ``1e3``), raster names (identifiers), parentheses;
* ``+ - * /`` (also the signs ``× ÷ −``), unary ``-`` and ``+``;
* comparisons ``< <= > >= == !=`` (chains allowed), giving 1.0 / 0.0;
* ``and``, ``or``, ``not`` (any non-zero value is true);
* functions ``min(a, b, ...)``, ``max(a, b, ...)``, ``where(cond, a, b)``,
  ``abs(a)``, ``clip(a, lo, hi)``.

Anything else -- attribute access, subscripts, other calls, keywords,
strings, ``**``, lambdas, comprehensions -- is rejected with a one-line
:class:`~mainspan.errors.InputError` giving the 1-based character position.
A cell where any raster the expression uses is nodata (NaN) gives NaN; so
does a non-finite result (for example a division by zero).

Examples
--------
>>> import numpy as np
>>> e = compile_expression("base + where(wetland > 0, 200, 0)", names=["base", "wetland"])
>>> e.names_used
('base', 'wetland')
>>> e.evaluate({"base": np.array([40.0, 40.0]), "wetland": np.array([0.0, 1.0])}).tolist()
[40.0, 240.0]
"""

from __future__ import annotations

import ast
import difflib
import operator
import re

import numpy as np

from ..errors import InputError

__all__ = ["Expression", "compile_expression", "FUNCTIONS"]

FUNCTIONS = ("abs", "clip", "max", "min", "where")
_ARITY = {"abs": (1, 1), "clip": (3, 3), "max": (2, None), "min": (2, None), "where": (3, 3)}
_BINOPS = {ast.Add: operator.add, ast.Sub: operator.sub, ast.Mult: operator.mul,
           ast.Div: operator.truediv}
_CMPOPS = {ast.Lt: np.less, ast.LtE: np.less_equal, ast.Gt: np.greater,
           ast.GtE: np.greater_equal, ast.Eq: np.equal, ast.NotEq: np.not_equal}
_SIGNS = {"\u00d7": "*", "\u00f7": "/", "\u2212": "-"}  # × ÷ − are one character each


_TOKEN = re.compile(r"""
    (?P<ws>\s+)
  | (?P<num>(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)
  | (?P<name>[^\W\d]\w*)
  | (?P<bad>\*\*|//)
  | (?P<op><=|>=|==|!=|[-+*/<>(),])
""", re.VERBOSE)
_OPEN_ENDED = {"+", "-", "*", "/", "<", ">", "<=", ">=", "==", "!=", "(", ",", "and", "or", "not"}


#: Longest expression accepted, in characters.
MAX_CHARS = 4000
#: Deepest nesting accepted (parentheses, and operators inside operators).
MAX_DEPTH = 60
#: Most operators, numbers and names accepted in one expression.
MAX_NODES = 2000


def _q(text: str) -> str:
    """The expression as quoted in messages: shortened when long."""
    return repr(text) if len(text) <= 80 else repr(text[:60]) + f" … ({len(text)} characters)"


def _check_size(text: str, tree=None):
    """Refuse expressions too long, too deep or too big to evaluate safely (one line each)."""
    if tree is None:
        if len(text) > MAX_CHARS:
            raise InputError(f"cost expression {_q(text)} is {len(text)} characters long; the "
                             f"limit is {MAX_CHARS}: combine the rasters beforehand or simplify")
        return
    count, stack = 0, [(tree, 0)]
    while stack:                                   # iterative: no recursion on deep input
        node, d = stack.pop()
        count += 1
        if d > MAX_DEPTH:
            raise InputError(f"cost expression {_q(text)} nests deeper than {MAX_DEPTH} levels "
                             f"(at position {_pos(text, node)}); simplify it, e.g. with "
                             "min()/max() of several terms")
        if count > MAX_NODES:
            raise InputError(f"cost expression {_q(text)} has more than {MAX_NODES} terms; "
                             "combine the rasters beforehand or simplify")
        stack.extend((c, d + 1) for c in ast.iter_child_nodes(node))


def _scan(text: str):
    """Reject characters and tokens outside the language, naming the 1-based position."""
    pos = 0
    depth = []
    last = None
    while pos < len(text):
        mt = _TOKEN.match(text, pos)
        if mt is None or mt.lastgroup == "bad":
            tok = mt.group() if mt is not None else text[pos]
            raise InputError(f"cost expression {_q(text)}: unexpected {tok!r} at position {pos + 1}; "
                             "allowed are numbers, raster names, + - * / ( ) , comparisons, "
                             f"and/or/not and the functions {', '.join(FUNCTIONS)}")
        tok = mt.group()
        if mt.lastgroup != "ws":
            if tok == "(":
                depth.append(pos)
                if len(depth) > MAX_DEPTH:
                    raise InputError(f"cost expression {_q(text)}: parentheses nest deeper "
                                     f"than {MAX_DEPTH} levels at position {pos + 1}; simplify it")
            elif tok == ")":
                if not depth:
                    raise InputError(f"cost expression {_q(text)}: unmatched ')' at position "
                                     f"{pos + 1}; remove it or add the opening '('")
                depth.pop()
            last = (tok, pos)
        pos = mt.end()
    if depth:
        raise InputError(f"cost expression {_q(text)}: '(' at position {depth[-1] + 1} is never "
                         "closed; add the closing ')'")
    if last is not None and last[0] in _OPEN_ENDED:
        raise InputError(f"cost expression {_q(text)}: it ends after {last[0]!r} at position "
                         f"{last[1] + 1}; complete the expression")


def _pos(text: str, node) -> int:
    """1-based character position of an AST node (col_offset counts UTF-8 bytes)."""
    off = getattr(node, "col_offset", 0) or 0
    return len(text.encode("utf-8")[:off].decode("utf-8", errors="ignore")) + 1


class Expression:
    """A checked expression; call :meth:`evaluate` with one array per raster name."""

    def __init__(self, text: str, tree: ast.Expression, names_used: tuple[str, ...]):
        self.text = text
        self._tree = tree
        self.names_used = names_used

    def __repr__(self):
        return f"Expression({self.text!r})"

    def evaluate(self, env: dict) -> np.ndarray:
        """Evaluate cell by cell.

        Parameters
        ----------
        env : dict of str -> ndarray
            One float array per name in :attr:`names_used`, all the same shape.

        Returns
        -------
        ndarray of float64
            NaN where any input is NaN or the result is not finite.
        """
        arrays = {k: np.asarray(env[k], dtype=np.float64) for k in self.names_used}
        shape = next(iter(arrays.values())).shape if arrays else ()
        with np.errstate(all="ignore"):
            out = np.broadcast_to(np.asarray(self._eval(self._tree.body, arrays), dtype=np.float64),
                                  shape).astype(np.float64, copy=True)
            bad = ~np.isfinite(out)
            for a in arrays.values():
                bad |= np.isnan(a)
        out[bad] = np.nan
        return out

    def _eval(self, node, env):
        ev = self._eval
        if isinstance(node, ast.Constant):
            return float(node.value)
        if isinstance(node, ast.Name):
            return env[node.id]
        if isinstance(node, ast.BinOp):
            return _BINOPS[type(node.op)](ev(node.left, env), ev(node.right, env))
        if isinstance(node, ast.UnaryOp):
            v = ev(node.operand, env)
            if isinstance(node.op, ast.USub):
                return -v
            if isinstance(node.op, ast.UAdd):
                return +v
            return np.logical_not(np.asarray(v) != 0).astype(np.float64)
        if isinstance(node, ast.Compare):
            left = ev(node.left, env)
            result = None
            for op, right_node in zip(node.ops, node.comparators):
                right = ev(right_node, env)
                r = _CMPOPS[type(op)](left, right)
                result = r if result is None else np.logical_and(result, r)
                left = right
            return np.asarray(result, dtype=np.float64)
        if isinstance(node, ast.BoolOp):
            vals = [np.asarray(ev(v, env)) != 0 for v in node.values]
            fn = np.logical_and if isinstance(node.op, ast.And) else np.logical_or
            acc = vals[0]
            for v in vals[1:]:
                acc = fn(acc, v)
            return np.asarray(acc, dtype=np.float64)
        if isinstance(node, ast.Call):
            name = node.func.id
            args = [ev(a, env) for a in node.args]
            if name == "abs":
                return np.abs(args[0])
            if name == "clip":
                return np.minimum(np.maximum(args[0], args[1]), args[2])
            if name == "where":
                return np.where(np.asarray(args[0]) != 0, args[1], args[2])
            fn = np.minimum if name == "min" else np.maximum
            acc = args[0]
            for a in args[1:]:
                acc = fn(acc, a)
            return acc
        raise AssertionError(f"unchecked node {type(node).__name__}")  # pragma: no cover


def _check(node, text, names, used):
    def fail(what, n=node):
        raise InputError(f"cost expression {_q(text)}: {what} at position {_pos(text, n)} is not "
                         f"allowed; use numbers, raster names, + - * /, comparisons, and/or/not "
                         f"and the functions {', '.join(FUNCTIONS)}")

    if isinstance(node, ast.Expression):
        return _check(node.body, text, names, used)
    if isinstance(node, ast.Constant):
        if isinstance(node.value, bool) or not isinstance(node.value, (int, float)):
            fail(f"constant {node.value!r}")
        try:
            finite = np.isfinite(float(node.value))
        except OverflowError:
            finite = False
        if not finite:
            raise InputError(f"cost expression {_q(text)}: the number at position "
                             f"{_pos(text, node)} is too large (the limit is about 1.8e308); "
                             "use a smaller cost, e.g. 1e9 for an effective barrier")
        return
    if isinstance(node, ast.Name):
        if node.id in FUNCTIONS:
            fail(f"function name {node.id!r} without a call")
        if node.id not in names:
            close = difflib.get_close_matches(node.id, list(names), n=1)
            hint = f" Did you mean {close[0]!r}?" if close else ""
            known = ", ".join(names) if names else "none"
            raise InputError(f"cost expression {_q(text)}: unknown raster {node.id!r} at position "
                             f"{_pos(text, node)}; the named rasters are: {known}.{hint}")
        if node.id not in used:
            used.append(node.id)
        return
    if isinstance(node, ast.BinOp):
        if type(node.op) not in _BINOPS:
            fail(f"operator {type(node.op).__name__}")
        _check(node.left, text, names, used)
        _check(node.right, text, names, used)
        return
    if isinstance(node, ast.UnaryOp):
        if not isinstance(node.op, (ast.USub, ast.UAdd, ast.Not)):
            fail(f"operator {type(node.op).__name__}")
        _check(node.operand, text, names, used)
        return
    if isinstance(node, ast.Compare):
        for op in node.ops:
            if type(op) not in _CMPOPS:
                fail(f"comparison {type(op).__name__}")
        _check(node.left, text, names, used)
        for c in node.comparators:
            _check(c, text, names, used)
        return
    if isinstance(node, ast.BoolOp):
        for v in node.values:
            _check(v, text, names, used)
        return
    if isinstance(node, ast.Call):
        if not isinstance(node.func, ast.Name) or node.func.id not in FUNCTIONS:
            what = node.func.id if isinstance(node.func, ast.Name) else ast.unparse(node.func)
            fail(f"call of {what!r}")
        if node.keywords or any(isinstance(a, ast.Starred) for a in node.args):
            fail(f"keyword or starred argument in {node.func.id}()")
        lo, hi = _ARITY[node.func.id]
        n = len(node.args)
        if n < lo or (hi is not None and n > hi):
            want = f"{lo}" if lo == hi else f"at least {lo}"
            raise InputError(f"cost expression {_q(text)}: {node.func.id}() at position "
                             f"{_pos(text, node)} takes {want} arguments, got {n}")
        for a in node.args:
            _check(a, text, names, used)
        return
    fail(type(node).__name__)


def compile_expression(text: str, *, names) -> Expression:
    """Parse and check a unit-cost expression.

    Parameters
    ----------
    text : str
        The expression.
    names : iterable of str
        Raster names the expression may use.

    Returns
    -------
    Expression

    Raises
    ------
    InputError
        Syntax error (with the offending token and its 1-based position), a
        construct outside the whitelist, an unknown raster name (with the
        closest known name), or a wrong number of function arguments.
    """
    if not isinstance(text, str) or not text.strip():
        raise InputError(f"cost expression must be a non-empty string; got {text!r}")
    names = tuple(names)
    _check_size(text)
    _scan(text.translate({ord(k): v for k, v in _SIGNS.items()}))
    # one character in, one character out, so positions stay those of *text*
    src = "".join(_SIGNS.get(ch, " " if ch in "\r\n\t" else ch) for ch in text)
    try:
        tree = ast.parse(src.strip(), mode="eval")
    except (RecursionError, MemoryError):
        raise InputError(f"cost expression {_q(text)} is too deeply nested to read; "
                         "simplify it") from None
    except SyntaxError as exc:
        lead = len(src) - len(src.lstrip())
        off = (exc.offset or 1) + lead
        tok = text[off - 1:off] if 0 < off <= len(text) else "end of expression"
        if off > len(text):
            tok = "end of expression"
        raise InputError(f"cost expression {_q(text)}: unexpected {tok!r} at position {off} "
                         f"({exc.msg}); check the operators and parentheses") from None
    _check_size(text, tree)
    used: list[str] = []
    # positions are reported relative to the stripped text; shift them back
    lead = len(src) - len(src.lstrip())
    if lead:
        for n in ast.walk(tree):
            if hasattr(n, "col_offset"):
                n.col_offset += lead
    _check(tree, text, names, used)
    return Expression(text, tree, tuple(used))

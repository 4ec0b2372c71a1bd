"""Reading rule text before it is compiled: length and nesting limits, quoted names, and the
``where`` clause rewritten as a conditional expression, then parsed with :mod:`ast` (nothing is
evaluated).

Names that are not Python identifiers are quoted in backticks (```region=north` >= 0``); this
module is the one place that knows the quoting.
"""
from __future__ import annotations

import ast
import io
import tokenize

from learnopt.core.errors import DataError

MAX_RULE_LENGTH = 5000
MAX_DEPTH = 60


class Quoted:
    """Backtick-quoted names are replaced by placeholders before parsing."""

    def __init__(self, text: str):
        self.names: dict[str, str] = {}
        out, i = [], 0
        parts = text.split("`")
        if len(parts) % 2 == 0:
            raise DataError(f"Rule {text!r}: unmatched backtick. Quote names that are not "
                            f"plain identifiers like `region=north`.")
        for j, part in enumerate(parts):
            if j % 2:
                key = f"__quoted_{i}"
                self.names[key] = part
                i += 1
                out.append(key)
            else:
                out.append(part)
        self.text = "".join(out)

    def restore(self, s: str) -> str:
        for key, name in self.names.items():
            s = s.replace(key, f"`{name}`")
        return s


def where_to_conditional(text: str) -> str:
    """Rewrite ``X where C`` as the conditional expression ``X if C else __rest__``."""
    try:
        toks = list(tokenize.generate_tokens(io.StringIO(text).readline))
    except (tokenize.TokenError, IndentationError, SyntaxError) as exc:
        raise DataError(f"Rule {text!r} cannot be read: {exc}. Check brackets and quotes.") from None
    out: list[tuple[int, str]] = []
    depth, pending = 0, []
    closing = {")", "]", "}"}

    def flush(at_depth: int):
        while pending and pending[-1] >= at_depth:
            pending.pop()
            out.append((tokenize.NAME, "else"))
            out.append((tokenize.NAME, "__rest__"))

    for tok in toks:
        if tok.type == tokenize.NAME and tok.string == "where":
            pending.append(depth)
            out.append((tokenize.NAME, "if"))
            continue
        if tok.type == tokenize.OP and tok.string in closing:
            flush(depth)
            depth -= 1
        elif tok.type == tokenize.OP and tok.string == ",":
            flush(depth)
        elif tok.type in (tokenize.NEWLINE, tokenize.ENDMARKER, tokenize.NL):
            flush(0)
        if tok.type == tokenize.OP and tok.string in ("(", "[", "{"):
            depth += 1
        out.append((tok.type, tok.string))
    flush(0)
    return tokenize.untokenize(out)


def shown(node: ast.AST, quoted: Quoted) -> str:
    s = ast.unparse(node)
    s = s.replace(" else __rest__", "").replace(" if ", " where ")
    return quoted.restore(s)


def nesting_depth(node: ast.AST) -> int:
    stack, best = [(node, 1)], 0
    while stack:
        n, d = stack.pop()
        best = max(best, d)
        if d > MAX_DEPTH:
            return d
        stack.extend((c, d + 1) for c in ast.iter_child_nodes(n))
    return best


def read(text: str) -> tuple[ast.Expression, Quoted]:
    """The parsed rule (an ast expression) and its quoted names; DataError with the reason."""
    if not isinstance(text, str) or not text.strip():
        raise DataError("A rule must be non-empty text such as \"a >= 0\".")
    if len(text) > MAX_RULE_LENGTH:
        raise DataError(f"Rule of {len(text)} characters is longer than the limit of "
                        f"{MAX_RULE_LENGTH}; split it into several rules.")
    quoted = Quoted(text)
    source = where_to_conditional(quoted.text.strip())
    try:
        tree = ast.parse(source.strip(), mode="eval")
    except (SyntaxError, ValueError, RecursionError, MemoryError) as exc:
        msg = getattr(exc, "msg", str(exc)) or type(exc).__name__
        raise DataError(f"Rule {text!r} is not valid rule syntax ({msg}). Rules look like "
                        f"\"a >= 0\", \"0 <= b <= 5\" or \"increasing(a, b, c)\".") from None
    depth = nesting_depth(tree.body)
    if depth > MAX_DEPTH:
        raise DataError(f"Rule {text!r} is nested {depth} levels deep, more than the limit "
                        f"{MAX_DEPTH}; write it more simply.")
    return tree, quoted

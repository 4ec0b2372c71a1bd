"""Reading rule text before it is compiled: length and nesting limits, quoted names, and the
``where`` clause rewritten as a conditional expression, then parsed with :mod:`ast` (nothing is
evaluated). This module is the one place that says how names are written in a rule.

How names are written
---------------------
* A name that is an identifier is written as it is: ``distance_km >= 0``.
* An encoded level is named ``column.level``; when both parts are identifiers it is written as
  it is too: ``region.north >= 0``. A dotted name means the coefficient of that name first (the
  level); only when no coefficient has the name does it mean a data column of that name.
* Any other name (spaces, symbols, a part that starts with a digit or is a Python keyword or
  ``where``, a level of a column whose name has spaces) is written in braces, exactly as it is, spaces
  included: ``{unit price} >= 0``, ``{band.10-15} <= {band.15-20}``. A braced name may stand
  wherever a bare name may.
* Braces mean nothing else in a rule (the rule language has no sets or dictionaries), so they
  cannot clash with the rest of the grammar, which is Python's expression syntax. Inside quoted
  text, such as a level in a ``where`` condition, braces are ordinary characters:
  ``prediction >= 1 where shop == '{north}'``.
* A name that itself holds a brace cannot be written in a rule: rename the column.

Replaced forms, still read in this release with an :class:`~learnopt.core.errors.OldSpellingWarning`
that gives the new form: names quoted in backticks instead of braces, and encoded levels named
``column=level`` instead of ``column.level`` (e.g. ``{region=north}``; the compiler translates
them). A name that would mean two things is refused, never guessed.
"""
from __future__ import annotations

import ast
import io
import keyword
import re
import tokenize
import unicodedata

import numpy as np

from learnopt.core.errors import DataError, warn_old_spelling

MAX_RULE_LENGTH = 5000
MAX_DEPTH = 60
TINY = 1e-12          # the smallest coefficient a rule may put on a name (floating point cannot honour less)
_KEY = re.compile(r"__quoted_\d+__")
_CLOSE = {"{": "}", "`": "`"}
_TRIPLE = ("'" * 3, '"' * 3)


def plain(name: str) -> bool:
    """Can ``name`` be written without braces (identifiers, joined by dots)?"""
    # \w+ as well as an identifier: Python's tokenizer reads names as \w+, so a character that
    # may continue an identifier but is not a word character (a middle dot, U+00B7) needs braces
    return all(part.isidentifier() and re.fullmatch(r"\w+", part) is not None and not keyword.iskeyword(part)
               and part != "where" and unicodedata.normalize("NFKC", part) == part for part in name.split("."))


def written(name: str) -> str:
    """``name`` as a rule writes it: bare when :func:`plain`, else in braces."""
    if "{" in name or "}" in name:
        raise DataError(f"The name {name!r} holds a brace, so a rule cannot name it; rename the "
                        f"column (e.g. with frame.rename(columns=...)).")
    return name if plain(name) else "{" + name + "}"


def _string_end(text: str, i: int) -> int:
    """Index just after the string literal opening at ``text[i]`` (the end of the text when it
    is never closed: the parser then says so)."""
    quote = text[i:i + 3] if text[i:i + 3] in _TRIPLE else text[i]
    j = i + len(quote)
    while j < len(text):
        if text[j] == "\\":
            j += 2
        elif text.startswith(quote, j):
            return j + len(quote)
        else:
            j += 1
    return len(text)


class Quoted:
    """Names in braces (or backticks, the replaced form) become placeholders before parsing;
    string literals are kept as they are."""

    def __init__(self, text: str):
        self.names: dict[str, str] = {}
        self.backticks = False
        out, i = [], 0
        while i < len(text):
            ch = text[i]
            if ch in "'\"":
                j = _string_end(text, i)
                out.append(text[i:j])
            elif ch in _CLOSE:
                j = self._close(text, i)
                self.backticks |= ch == "`"
                key = f"__quoted_{len(self.names)}__"
                self.names[key] = text[i + 1:j - 1]
                out.append(f" {key} ")
            elif ch == "}":
                raise DataError(f"Rule {text!r}: the }} at character {i + 1} closes no {{. Names with "
                                f"spaces or symbols are written in braces, {{unit price}}; a name that "
                                f"holds a brace cannot be written in a rule (rename the column).")
            else:
                j = i + 1
                out.append(ch)
            i = j
        self.text = "".join(out)

    @staticmethod
    def _close(text: str, i: int) -> int:
        """Index just after the quote that closes the one at ``text[i]``."""
        ch = text[i]
        j = text.find(_CLOSE[ch], i + 1)
        if j < 0:
            raise DataError(f"Rule {text!r}: the {ch} at character {i + 1} is never closed. Names "
                            f"with spaces or symbols are written in braces: {{unit price}}.")
        if j == i + 1:
            raise DataError(f"Rule {text!r}: empty {ch}{_CLOSE[ch]} at character {i + 1}; write the "
                            f"name inside, e.g. {{unit price}}.")
        if ch == "{" and "{" in text[i + 1:j]:
            raise DataError(f"Rule {text!r}: a {{ inside the braced name that starts at character "
                            f"{i + 1}. Braces cannot nest, and a name that holds a brace cannot be "
                            f"written in a rule (rename the column).")
        return j + 1

    def restore(self, s: str) -> str:
        """``s`` with the placeholders written back as names (in braces where needed)."""
        def name(m):
            n = self.names.get(m.group(0))
            return m.group(0) if n is None else n if plain(n) else "{" + n + "}"
        return _KEY.sub(name, s)

    def warn_backticks(self, text: str) -> None:
        """The replaced backtick form was used: say how to write it now."""
        if not self.backticks:
            return
        braced = [n for n in self.names.values() if "{" in n or "}" in n]
        fix = (f"the name {braced[0]!r} holds a brace and cannot be written so; rename the column"
               if braced else "write " + repr(re.sub(r"`([^`]*)`", r"{\1}", text)))
        warn_old_spelling(f"Rule {text!r}: names are now quoted in braces, not backticks; {fix}. "
                          f"Backticks are still read in this release.")


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


def too_small(row, bound: float, names) -> str | None:
    """Why a rule's coefficients cannot be honoured in floating point (``1e-300 * a >= 1``: a
    would have to reach 1e300; ``a + 1e-20 * b``: b is lost beside a), or None."""
    A = np.abs(np.asarray(row, dtype=float))
    tiny = [j for j in np.flatnonzero(A) if A[j] < TINY or A[j] < 1e-15 * A.max() or abs(bound) > 1e15 * A.max()]
    if not tiny:
        return None
    shown_ = ", ".join(f"{A[j]:g} on {written(str(names[j]))}" for j in tiny)
    return (f"the coefficient {shown_} is below what floating point can honour beside the rule's other numbers "
            f"(relative precision 1e-15, bounds up to 1e15); rescale the rule or the column so that its "
            f"numbers are closer in size.")


def read(text: str) -> tuple[ast.Expression, Quoted]:
    """The parsed rule (an ast expression) and its quoted names; DataError with the reason."""
    if not isinstance(text, str) or not text.strip():
        raise DataError("A rule must be non-empty text such as \"a >= 0\".")
    if len(text) > MAX_RULE_LENGTH:
        raise DataError(f"Rule of {len(text)} characters is longer than the limit of "
                        f"{MAX_RULE_LENGTH}; split it into several rules.")
    quoted = Quoted(text)
    quoted.warn_backticks(text)
    source = where_to_conditional(quoted.text.strip())
    try:
        tree = ast.parse(source.strip(), mode="eval")
    except (SyntaxError, ValueError, RecursionError, MemoryError) as exc:
        msg = getattr(exc, "msg", str(exc)) or type(exc).__name__
        raise DataError(f"Rule {text!r} is not valid rule syntax ({msg}). Rules look like "
                        f"\"a >= 0\", \"0 <= b <= 5\" or \"increasing(a, b, c)\"; names with spaces "
                        f"or symbols are written in braces, {{unit price}}.") from None
    depth = nesting_depth(tree.body)
    if depth > MAX_DEPTH:
        raise DataError(f"Rule {text!r} is nested {depth} levels deep, more than the limit "
                        f"{MAX_DEPTH}; write it more simply.")
    return tree, quoted

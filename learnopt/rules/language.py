"""Requirements: the rule language, parsed safely, compiled to linear and norm constraints.

A rule is text over coefficient names, ``intercept``, ``prediction`` and data columns::

    "distance_km >= 0"          "0 <= stops <= 4"            "a + b + c == 1"
    "increasing(size_s, size_m, size_l)"   "norm2(a, b, c) <= 1"   "norm1(a, b) <= 2"
    "prediction >= cost where segment == 'retail'"
    "mean(prediction where region == 'north') - mean(prediction where region == 'south') <= 0.5"

How names are written (``region.north``, ``{unit price}``) is set out in one place, the
docstring of :mod:`learnopt.rules.reading`. A name in a rule body means the coefficient when a
feature has that name, otherwise the data column; in a ``where`` condition it is always the data
column. Prediction rules hold on the training rows they select.

Text is parsed with Python's :mod:`ast` and walked with a whitelist; nothing is evaluated.
Every rule compiles to :class:`Requirement` objects over theta = (coefficients, intercept):

* ``A theta <= rhs`` or ``A theta == rhs`` (one row per scalar condition or selected data row);
* ``||A theta + offset||_order + f . theta <= bound`` for norm rules.
"""
from __future__ import annotations

import ast

import numpy as np
import pandas as pd

from learnopt.core.errors import DataError, NotConvexError, warn_old_spelling
from learnopt.rules.reading import Quoted, read, shown, too_small, written
from learnopt.rules.requirements import Affine, Context, NormTerm, NoRows, Requirement
from learnopt.core.checks import nearest

FUNCTIONS = ("increasing", "decreasing", "nonnegative", "nonpositive", "norm1", "norm2", "abs", "mean", "sum")
SHAPES = ("increasing", "decreasing", "nonnegative", "nonpositive")      # functions that are whole rules
RENAMED = {"nonneg": "nonnegative", "nonpos": "nonpositive"}             # earlier names, still read


def _scalar(ctx, A=None, c=0.0) -> Affine:
    return Affine(np.zeros((1, ctx.p)) if A is None else A.reshape(1, -1), np.array([float(c)]))


# ----------------------------------------------------------------------------- parsing

def parse(text: str, ctx: Context) -> list[Requirement]:
    """Compile one rule text into requirements; raise DataError / NotConvexError with the reason."""
    tree, quoted = read(text)
    return _Compiler(text, ctx, quoted).top(tree.body)


_CMP = {ast.Lt: "<", ast.LtE: "<=", ast.Gt: ">", ast.GtE: ">=", ast.Eq: "==", ast.NotEq: "!="}


class _Compiler:
    def __init__(self, text: str, ctx: Context, quoted: Quoted):
        self.text, self.ctx, self.quoted = text, ctx, quoted
        self.index = {n: i for i, n in enumerate(ctx.names)}
        self.columns = set(ctx.frame.columns) if ctx.frame is not None else set()
        self.references: list[str] = []      # reference levels the rule names (coefficient 0)
        self.predicts = False                 # the rule names 'prediction'

    # ---- errors
    def fail(self, why: str) -> DataError:
        return DataError(f"Rule {self.text!r}: {why}")

    def not_convex(self, why: str) -> NotConvexError:
        return NotConvexError(f"Rule {self.text!r} is not convex: {why}")

    def _name(self, node: ast.AST) -> str | None:
        """The name a Name node, or a dotted chain of them (``region.north``), stands for."""
        if isinstance(node, ast.Name):
            return self.quoted.names.get(node.id, node.id)
        if isinstance(node, ast.Attribute):
            head = self._name(node.value)
            return None if head is None else f"{head}.{node.attr}"
        return None

    def unknown(self, name: str, condition: bool = False) -> DataError:
        names = [n for n in self.ctx.names if not n.startswith("\x00")]   # not internal term slots
        if condition and (name in self.index or name in self.ctx.reference):
            column = max((str(c) for c in self.columns if name.startswith(f"{c}.")), key=len, default=None)
            example = "" if column is None else \
                f", e.g. {_written(column)} == {name[len(column) + 1:]!r}"
            return self.fail(f"{_written(name)} is a coefficient, and a 'where' condition reads data "
                             f"columns: compare the column itself{example}.")
        known = names + ["prediction"] + sorted(map(str, self.columns))
        hint = nearest(name, list(dict.fromkeys(known)), show=_written)
        return self.fail(f"unknown name {name!r}{hint}. Coefficients: {', '.join(map(_written, names))}"
                         + (f"; data columns: {', '.join(_written(str(c)) for c in sorted(map(str, self.columns)))}"
                            if self.columns else "")
                         + ". Names with spaces or symbols are written in braces, e.g. {unit price}; "
                           "encoded levels as column.level, e.g. region.north.")

    def former(self, name: str) -> str:
        """A level written in the replaced ``column=level`` form: its name now, with a warning;
        refused when the old spelling is also the name of a coefficient or data column."""
        new = self.ctx.former[name]
        if name in self.index or name in self.columns:
            what = "coefficient" if name in self.index else "data column"
            raise self.fail(f"{_written(name)} is both a {what} and the old spelling of level "
                            f"{_written(new)}; write {_written(new)} for the level, and rename the "
                            f"column {name!r} to use it in a rule.")
        warn_old_spelling(f"Rule {self.text!r}: encoded levels are now named column.level; write "
                          f"{_written(new)} for {_written(name)}. The old form is still read in this release.")
        return new

    # ---- top level: a comparison or a shape function, optionally with a where
    def top(self, node: ast.AST, mask: np.ndarray | None = None) -> list[Requirement]:
        if isinstance(node, ast.IfExp):
            if mask is not None:
                raise self.fail("only one 'where' may apply to a whole rule.")
            return self.top(node.body, self.condition(node.test))
        if isinstance(node, ast.Compare):
            return self.compare(node, mask)
        if isinstance(node, ast.Call) and isinstance(node.func, ast.Name) and self.renamed(node.func.id) in SHAPES:
            return self.shape(node)
        raise self.fail("a rule must be a comparison such as \"a >= 0\" or \"0 <= b <= 5\", "
                        "or one of increasing(...), decreasing(...), nonnegative(...), nonpositive(...).")

    def renamed(self, fn: str) -> str:
        """A rule function's name of today (an earlier name is read, with a note)."""
        if fn in RENAMED:
            warn_old_spelling(f"Rule {self.text!r}: {fn}(...) is now written {RENAMED[fn]}(...); "
                              f"the earlier name is still read.")
            return RENAMED[fn]
        return fn

    def shape(self, node: ast.Call) -> list[Requirement]:
        fn = RENAMED.get(node.func.id, node.func.id)
        if node.keywords:
            raise self.fail(f"{fn}(...) takes coefficient names only, no keywords.")
        terms = [self.value(a, None) for a in node.args]
        if any(not isinstance(t, Affine) or t.rows is not None for t in terms):
            raise self.fail(f"{fn}(...) takes coefficient names or scalar expressions of them.")
        if fn in ("increasing", "decreasing") and len(terms) < 2:
            raise self.fail(f"{fn}(...) needs at least two names.")
        if not terms:
            raise self.fail(f"{fn}(...) needs at least one name.")
        if fn in ("increasing", "decreasing"):
            sign = 1.0 if fn == "increasing" else -1.0
            A = np.vstack([sign * (terms[i].A - terms[i + 1].A) for i in range(len(terms) - 1)])
            rhs = np.concatenate([-sign * (terms[i].c - terms[i + 1].c) for i in range(len(terms) - 1)])
        else:
            sign = -1.0 if fn == "nonnegative" else 1.0
            A = np.vstack([sign * t.A for t in terms])
            rhs = np.concatenate([-sign * t.c for t in terms])
        return [Requirement(self.text, "<=", A, rhs)]

    def compare(self, node: ast.Compare, mask) -> list[Requirement]:
        sides = [node.left] + list(node.comparators)
        values = [self.value(s, mask) for s in sides]
        chain = len(node.ops) > 1
        reqs = []
        for i, op in enumerate(node.ops):
            sym = _CMP.get(type(op))
            if sym is None or sym == "!=":
                raise self.fail("use <=, >=, == (or < and >, read as <= and >=) to compare.")
            text = self.text
            if chain:
                piece = ast.Compare(left=sides[i], ops=[op], comparators=[sides[i + 1]])
                text = shown(piece, self.quoted)
            lhs, rhs = values[i], values[i + 1]
            if sym in (">=", ">"):
                lhs, rhs = rhs, lhs
            reqs.append(self.relation(lhs, rhs, "==" if sym == "==" else "<=", text))
        return reqs

    def relation(self, lhs, rhs, sense: str, text: str) -> Requirement:
        if isinstance(lhs, NormTerm) or isinstance(rhs, NormTerm):
            if sense == "==":
                raise self.not_convex("a norm may not be set equal to a value: the set where "
                                      "norm(...) == c is a hollow sphere, not a convex set. "
                                      "Use norm(...) <= c.")
            if isinstance(rhs, NormTerm):
                raise self.not_convex(f"{rhs.source} is on the larger side of the comparison: "
                                      f"keeping a norm above a value leaves a hole, which is not "
                                      f"convex. Only norm(...) <= value is allowed.")
            aff = _sub(lhs.affine, rhs, self)
            if aff.rows is not None:
                raise self.fail("a norm rule must compare scalars, not predictions row by row.")
            return Requirement(text, "norm", lhs.A / 1.0, lhs.c, order=lhs.order,
                               f=aff.A[0] / lhs.k, bound=float(-aff.c[0] / lhs.k))
        diff = _sub(lhs, rhs, self)
        if diff.constant:
            if self.references and diff.rows is None:
                return self.about_references(diff, sense, text)
            raise self.fail("it names no coefficient and no prediction, so it cannot constrain the fit.")
        # rules over predictions carry round-off from the data (1e-16 on the intercept): not checked
        tiny = None if diff.rows is not None or self.predicts else too_small(diff.A[0], float(diff.c[0]), self.ctx.names)
        if tiny:
            raise self.fail(tiny)
        return Requirement(text, sense, diff.A, -diff.c)

    def about_references(self, diff, sense: str, text: str) -> Requirement:
        value = float(diff.c[0])
        if (value > 0) if sense == "<=" else (value != 0):
            raise self.fail(f"{', '.join(map(_written, self.references))}: a reference level has no coefficient "
                            f"of its own (0 by construction), so the rule reads {value:g} {sense} 0, which can "
                            f"never hold. Name a level that has a coefficient, or drop the rule.")
        return Requirement(text, sense, diff.A, -diff.c)

    def condition(self, node: ast.AST) -> np.ndarray:
        if self.ctx.frame is None:
            raise self.fail(self.ctx.no_rows or "'where' conditions need data columns; give the data as a DataFrame.")
        mask = self._cond(node)
        if not mask.any():
            raise NoRows(f"Rule {self.text!r}: the condition {shown(node, self.quoted)!r} selects no rows of the data.")
        return mask

    def _cond(self, node):
        if isinstance(node, ast.BoolOp):
            masks = [self._cond(v) for v in node.values]
            return np.logical_and.reduce(masks) if isinstance(node.op, ast.And) else np.logical_or.reduce(masks)
        if isinstance(node, ast.UnaryOp) and isinstance(node.op, ast.Not):
            return ~self._cond(node.operand)
        if isinstance(node, ast.Compare):
            values = [self._cond_value(v) for v in [node.left] + list(node.comparators)]
            mask = np.ones(len(self.ctx.frame), dtype=bool)
            for i, op in enumerate(node.ops):
                a, b = values[i], values[i + 1]
                if isinstance(op, (ast.In, ast.NotIn)):
                    if not isinstance(b, list):
                        raise self.fail("'in' needs a list of values, e.g. region in ('north', 'south').")
                    m = pd.Series(a).isin(b).to_numpy() if isinstance(a, np.ndarray) else np.full(len(mask), a in b)
                    mask &= ~m if isinstance(op, ast.NotIn) else m
                    continue
                sym = _CMP.get(type(op))
                if sym is None:
                    raise self.fail("conditions compare with ==, !=, <, <=, >, >=, in.")
                try:
                    m = {"<": np.less, "<=": np.less_equal, ">": np.greater, ">=": np.greater_equal,
                         "==": np.equal, "!=": np.not_equal}[sym](a, b)
                except TypeError:
                    raise self.fail(f"cannot compare {shown(node, self.quoted)!r}: the column and "
                                    f"the value have different types (text vs number).") from None
                mask &= np.asarray(m, dtype=bool)
            return mask
        raise self.fail(f"{shown(node, self.quoted)!r} is not a condition; write e.g. "
                        f"segment == 'retail' or distance_km > 10.")

    def number(self, value, limit: float = 1e15) -> float:
        """A number written in the rule as a float; refused beyond ``limit`` in size (or too long)."""
        try:
            v = float(value)
        except OverflowError:
            v = float("inf")
        if not np.isfinite(v) or abs(v) > limit:
            text = (f"{value!r}" if np.isfinite(v) else "written, beyond floating point's range,") \
                if isinstance(value, float) or np.isfinite(v) else f"with {len(str(abs(value)))} digits"
            raise self.fail(f"the number {text} is too large to use (the limit is {limit:g} in size); rescale the data.")
        return v

    def _cond_value(self, node):
        if isinstance(node, ast.Constant) and isinstance(node.value, (int, float)) and not isinstance(node.value, bool):
            return self.number(node.value, 1e300)
        if isinstance(node, ast.Constant) and isinstance(node.value, str):
            return node.value
        if isinstance(node, (ast.Tuple, ast.List)):
            return [self._cond_value(e) for e in node.elts]
        if isinstance(node, ast.UnaryOp) and isinstance(node.op, ast.USub) and isinstance(node.operand, ast.Constant):
            v = self._cond_value(node.operand)
            if isinstance(v, str):
                raise self.fail("a minus sign cannot apply to text.")
            return -v
        name = self._name(node)
        if name is not None:
            if name in self.columns:
                return self.ctx.frame[name].to_numpy()
            raise self.unknown(name, condition=True)
        raise self.fail(f"{shown(node, self.quoted)!r} is not allowed in a condition; use data "
                        f"column names, numbers and quoted text.")

    # ---- values: affine expressions, norms
    def value(self, node: ast.AST, mask):
        if isinstance(node, ast.Constant):
            if isinstance(node.value, bool) or not isinstance(node.value, (int, float)):
                raise self.fail(f"{node.value!r} is not a number; text appears only in 'where' conditions.")
            return _scalar(self.ctx, c=self.number(node.value))
        if isinstance(node, (ast.Name, ast.Attribute)) and self._name(node) is not None:
            return self.name_value(self._name(node), mask)
        if isinstance(node, ast.UnaryOp) and isinstance(node.op, (ast.USub, ast.UAdd)):
            v = self.value(node.operand, mask)
            return v if isinstance(node.op, ast.UAdd) else _scale(v, -1.0, self)
        if isinstance(node, ast.BinOp):
            return self.binop(node, mask)
        if isinstance(node, ast.Call):
            return self.call(node, mask)
        if isinstance(node, ast.IfExp):
            if mask is not None:
                raise self.fail("a 'where' inside another 'where' is not allowed; combine the "
                                "conditions with 'and'.")
            return self.value(node.body, self.condition(node.test))
        if isinstance(node, ast.Compare):
            raise self.fail("comparisons cannot be nested inside an expression.")
        if isinstance(node, ast.Attribute):
            raise self.fail(f"{shown(node, self.quoted)!r}: a dot joins an encoded column and its "
                            f"level (region.north); it cannot follow an expression.")
        raise self.fail(f"{shown(node, self.quoted)!r} is not part of the rule language.")

    def name_value(self, name: str, mask):
        if name == "__rest__":
            raise self.fail("'where' must follow an expression.")
        if name in self.ctx.former:
            name = self.former(name)
        if name in self.index:
            A = np.zeros((1, self.ctx.p))
            A[0, self.index[name]] = 1.0
            return Affine(A, np.zeros(1))
        if name in self.ctx.reference:
            self.references.append(name)
            return _scalar(self.ctx)  # a reference level's coefficient is 0 by construction
        if name == "prediction":
            self.predicts = True
            if self.ctx.aggregates is not None:
                self.ctx.aggregates.saw_prediction(self)
            if self.ctx.design is None:
                raise self.fail(self.ctx.no_rows or "'prediction' needs the training data.")
            rows = np.arange(self.ctx.design.shape[0]) if mask is None else np.flatnonzero(mask)
            block = self.ctx.design[rows]
            block = block.toarray() if hasattr(block, "toarray") else block   # only the selected rows
            return Affine(np.asarray(block, dtype=float), np.zeros(len(rows)), rows)
        if name == "intercept":
            raise self.fail("the task has no intercept (intercept=False), so 'intercept' cannot be used.")
        if name in self.columns:
            col = self.ctx.frame[name]
            if not pd.api.types.is_numeric_dtype(col) or pd.api.types.is_bool_dtype(col):
                raise self.fail(f"data column {name!r} is not numeric, so it cannot be used as a "
                                f"value; use it in a 'where' condition instead.")
            vals = col.to_numpy(dtype=float)
            rows = np.arange(len(vals)) if mask is None else np.flatnonzero(mask)
            if not np.all(np.isfinite(vals[rows])):
                raise self.fail(f"data column {name!r} has missing or infinite values in the rows the rule uses.")
            return Affine(np.zeros((len(rows), self.ctx.p)), vals[rows], rows)
        raise self.unknown(name)

    def binop(self, node: ast.BinOp, mask):
        a, b = self.value(node.left, mask), self.value(node.right, mask)
        op = node.op
        if isinstance(op, (ast.Add, ast.Sub)):
            sign = 1.0 if isinstance(op, ast.Add) else -1.0
            if isinstance(b, NormTerm):
                if sign < 0:
                    raise self.not_convex(f"subtracting {b.source} makes a concave term; a norm may only be added.")
                a, b = b, a
            if isinstance(a, NormTerm):
                if isinstance(b, NormTerm):
                    raise self.fail("only one norm per side of a rule is supported; split the rule.")
                return NormTerm(a.k, a.A, a.c, a.order, _add(a.affine, _scale(b, sign, self), self), a.source)
            return _add(a, _scale(b, sign, self), self)
        if isinstance(op, ast.Mult):
            for x, y in ((a, b), (b, a)):
                if isinstance(x, Affine) and x.rows is None and x.constant:
                    return _scale(y, float(x.c[0]), self)
            if isinstance(a, NormTerm) or isinstance(b, NormTerm):
                raise self.not_convex("a norm may only be multiplied by a number.")
            if isinstance(a, Affine) and isinstance(b, Affine) and (a.rows is not None or b.rows is not None) \
                    and (a.constant or b.constant):
                raise self.fail("multiplying by a data column row by row is not supported; "
                                "use a number.")
            raise self.not_convex(f"{shown(node, self.quoted)!r} multiplies two unknowns "
                                  f"(coefficients or predictions); a product of unknowns is not convex. "
                                  f"Rules must be linear in the coefficients, or norms <= a value.")
        if isinstance(op, ast.Div):
            if isinstance(b, Affine) and b.rows is None and b.constant:
                if b.c[0] == 0:
                    raise self.fail("division by zero.")
                return _scale(a, 1.0 / float(b.c[0]), self)
            raise self.not_convex(f"{shown(node, self.quoted)!r} divides by an unknown or a data "
                                  f"column; only division by a number keeps a rule convex.")
        if isinstance(op, ast.Pow):
            if isinstance(a, Affine) and a.constant and a.rows is None and isinstance(b, Affine) and b.constant and b.rows is None:
                try:
                    v = float(a.c[0]) ** float(b.c[0])
                except (OverflowError, ZeroDivisionError):
                    v = float("inf")
                if not np.isfinite(v) or isinstance(v, complex) or abs(v) > 1e15:
                    raise self.fail(f"{shown(node, self.quoted)!r} is not a usable number.")
                return _scalar(self.ctx, c=v)
            raise self.not_convex(f"{shown(node, self.quoted)!r} raises an unknown to a power; "
                                  f"powers of coefficients are not linear, and an equality or "
                                  f"lower bound on them is not convex. Use norm2(...) <= value "
                                  f"for a bound on a sum of squares.")
        raise self.fail(f"the operator in {shown(node, self.quoted)!r} is not part of the rule language.")

    def call(self, node: ast.Call, mask):
        if not isinstance(node.func, ast.Name):
            raise self.fail("only the rule functions " + ", ".join(FUNCTIONS) + " may be called.")
        fn = self.renamed(node.func.id)
        if fn not in FUNCTIONS:
            raise self.fail(f"unknown function {fn!r}{nearest(fn, FUNCTIONS)}."
                            + " Rule functions: " + ", ".join(FUNCTIONS) + ".")
        if node.keywords:
            raise self.fail(f"{fn}(...) takes no keywords.")
        if fn in SHAPES:
            raise self.fail(f"{fn}(...) is a whole rule; it cannot be part of an expression.")
        if fn in ("mean", "sum") and self.ctx.aggregates is not None:
            if len(node.args) != 1:
                raise self.fail(f"{fn}(...) takes one row-wise expression, e.g. {fn}(prediction where region == 'north').")
            return self.ctx.aggregates(self, fn, node.args[0], mask)
        args = [self.value(a, mask) for a in node.args]
        if not args:
            raise self.fail(f"{fn}(...) needs an argument.")
        if any(isinstance(a, NormTerm) for a in args):
            raise self.fail(f"{fn}(...) cannot take a norm as argument.")
        if fn in ("mean", "sum"):
            if len(args) != 1 or args[0].rows is None:
                raise self.fail(f"{fn}(...) takes one row-wise expression, e.g. {fn}(prediction where region == 'north').")
            v = args[0]
            factor = 1.0 / v.A.shape[0] if fn == "mean" else 1.0
            return Affine(factor * v.A.sum(axis=0, keepdims=True), np.array([factor * v.c.sum()]))
        # norms: of the listed scalars, or of one row-wise expression
        if len(args) == 1 and args[0].rows is not None:
            A, c = args[0].A, args[0].c
        else:
            if any(a.rows is not None for a in args):
                raise self.fail(f"{fn}(...) takes either scalars or one row-wise expression.")
            A, c = np.vstack([a.A for a in args]), np.concatenate([a.c for a in args])
        order = 2.0 if fn == "norm2" else 1.0
        if fn == "abs" and len(A) != 1:
            raise self.fail("abs(...) takes one scalar; use norm1(...) for several.")
        return NormTerm(1.0, A, c, order, _scalar(self.ctx), shown(node, self.quoted))


def _written(name: str) -> str:
    """A name as a rule writes it, for messages (a name with a brace is shown quoted)."""
    return repr(name) if "{" in name or "}" in name else written(name)


def _add(a, b, comp: _Compiler) -> Affine:
    if isinstance(b, NormTerm):
        return _add(b, a, comp)  # pragma: no cover - callers order NormTerm first
    rows = a.rows if a.rows is not None else b.rows
    if a.rows is not None and b.rows is not None and not np.array_equal(a.rows, b.rows):
        raise comp.fail("the two sides select different rows; give both the same 'where' "
                        "condition, or compare means with mean(...).")
    return Affine(a.A + b.A, a.c + b.c, rows)


def _sub(a, b, comp):
    return _add(a, _scale(b, -1.0, comp), comp)


def _scale(v, k: float, comp):
    if isinstance(v, NormTerm):
        if k < 0:
            raise comp.not_convex(f"-{v.source} is concave; a norm may only be added with a positive factor.")
        if k == 0:
            return _scale(v.affine, 0.0, comp)
        return NormTerm(v.k * k, v.A, v.c, v.order, _scale(v.affine, k, comp), v.source)
    return Affine(k * v.A, k * v.c, v.rows)

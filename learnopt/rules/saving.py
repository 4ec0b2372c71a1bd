"""Rules as plain data for model files: every rule object is a frozen dataclass of numbers,
names and text, written as ``{"rule": class name, "fields": {...}}`` and rebuilt by class name
(no pickle, nothing evaluated).

>>> from learnopt.rules.regions import ball
>>> spec = ball((1.0, 2.0), 3.0)
>>> to_plain(spec)
{'rule': 'Ball', 'fields': {'centre': [1.0, 2.0], 'radius': 3.0, 'features': ['x', 'y']}}
>>> from_plain(to_plain(spec)) == spec
True
"""
from __future__ import annotations

import dataclasses

from learnopt.core.errors import DataError
from learnopt.rules.domain import Over
from learnopt.rules.objects import Bounds, TextRule
from learnopt.rules.regions import Ball, Polygon, Segment
from learnopt.rules.requirements import RuleSpec
from learnopt.rules.shapes import Shape

KINDS = {cls.__name__: cls for cls in (TextRule, Bounds, Polygon, Ball, Segment, Over, Shape)}


def _listed(value):
    return [_listed(v) for v in value] if isinstance(value, (list, tuple)) else value


def _tupled(value):
    return tuple(_tupled(v) for v in value) if isinstance(value, list) else value


def to_plain(spec: RuleSpec) -> dict:
    """A rule object as JSON-ready data; refuses rule objects learnopt cannot rebuild."""
    name = type(spec).__name__
    if KINDS.get(name) is not type(spec):
        raise DataError(f"The rule {spec.text!r} is a {name}, which a model file cannot hold; model files hold "
                        f"text rules, bounds, polygons, balls, segments and rules over a box.")
    return {"rule": name, "fields": {f.name: _listed(getattr(spec, f.name)) for f in dataclasses.fields(spec)}}


def file_entry(spec: RuleSpec) -> str | dict:
    """How a fit's model file holds a rule: as text when the rule language reads the text back as the
    same rule (text rules, bounds) or learnopt cannot rebuild the object; as plain data otherwise
    (a rule over a box, a region). :func:`from_plain` reads both."""
    if isinstance(spec, (TextRule, Bounds)) or KINDS.get(type(spec).__name__) is not type(spec):
        return spec.text
    return to_plain(spec)


def from_plain(entry) -> RuleSpec:
    """The rule object :func:`to_plain` wrote (a bare string is a text rule)."""
    if isinstance(entry, str):
        return TextRule(entry)
    cls = KINDS.get(entry.get("rule")) if isinstance(entry, dict) else None
    if cls is None or not isinstance(entry.get("fields"), dict):
        raise DataError(f"The model file holds a rule learnopt cannot read ({entry!r}); it was written by another "
                        f"version of learnopt or edited by hand.")
    names = {f.name for f in dataclasses.fields(cls)}
    if set(entry["fields"]) != names:
        raise DataError(f"The model file's {entry['rule']} rule has fields {sorted(entry['fields'])}; "
                        f"it needs exactly {sorted(names)}.")
    return cls(**{k: _tupled(v) for k, v in entry["fields"].items()})

"""Rules on coefficients, predictions and centres (``lo.rule``): the text language, rule objects
for regions, and the requirements they compile to.

>>> import learnopt as lo
>>> lo.rule.bounds(price=(None, 0)).text
'price <= 0'
"""
from learnopt.rules.domain import Over, over
from learnopt.rules.language import parse
from learnopt.rules.objects import Bounds, TextRule, as_spec, bounds, compile_all
from learnopt.rules.regions import Ball, Polygon, Segment, ball, outside, polygon, segment, separation
from learnopt.rules.requirements import Context, NoRows, Requirement, RuleSpec

__all__ = ["bounds", "over", "Over", "ball", "polygon", "segment", "outside", "separation", "Bounds", "Ball", "Polygon",
           "Segment", "TextRule", "RuleSpec", "Requirement", "Context", "NoRows", "as_spec", "compile_all", "parse"]

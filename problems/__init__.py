"""Optimisation problems: templates (topology + design variables), the name registry, run-config
problem specs and the vectorized pymoo problem."""
from .problem import Evaluation, TiltProblem
from .spec import Envelope, Limits, ProblemSpec, parse_problem
from .templates import TEMPLATES, DesignVariable, Move, Template, get_template, template_from_mechanism

__all__ = ["DesignVariable", "Move", "Template", "TEMPLATES", "get_template", "template_from_mechanism",
           "Envelope", "Limits", "ProblemSpec", "parse_problem", "Evaluation", "TiltProblem"]

"""Optimisation problems: templates (topology + design variables), the name registry, run-config
problem specs and the vectorized pymoo problem."""
from .templates import DesignVariable, Move, Template, TEMPLATES, get_template, template_from_mechanism
from .spec import Envelope, Limits, ProblemSpec, parse_problem
from .problem import Evaluation, TiltProblem

__all__ = ["DesignVariable", "Move", "Template", "TEMPLATES", "get_template", "template_from_mechanism",
           "Envelope", "Limits", "ProblemSpec", "parse_problem", "Evaluation", "TiltProblem"]

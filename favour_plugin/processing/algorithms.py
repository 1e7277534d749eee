"""The list of algorithms the provider loads."""

from .evaluate_tree import EvaluateTreeAlgorithm

ALGORITHMS = (EvaluateTreeAlgorithm,)

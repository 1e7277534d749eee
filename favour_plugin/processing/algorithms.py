"""The list of algorithms the provider loads."""

from .combine import CombineAlgorithm
from .distance_membership import DistanceMembershipAlgorithm
from .evaluate_tree import EvaluateTreeAlgorithm
from .membership import MembershipAlgorithm
from .reproduce import ReproduceAlgorithm

ALGORITHMS = (EvaluateTreeAlgorithm, MembershipAlgorithm, DistanceMembershipAlgorithm,
              CombineAlgorithm, ReproduceAlgorithm)

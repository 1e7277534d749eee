"""The list of algorithms the provider loads."""

from .combine import CombineAlgorithm
from .distance_membership import DistanceMembershipAlgorithm
from .evaluate_tree import EvaluateTreeAlgorithm
from .evidence_weights import EvidenceWeightsAlgorithm
from .membership import MembershipAlgorithm
from .posterior import PosteriorAlgorithm
from .reproduce import ReproduceAlgorithm

ALGORITHMS = (EvaluateTreeAlgorithm, MembershipAlgorithm, DistanceMembershipAlgorithm,
              CombineAlgorithm, ReproduceAlgorithm, EvidenceWeightsAlgorithm, PosteriorAlgorithm)

"""The list of algorithms the provider loads."""

from .aggregate_scores import AggregateScoresAlgorithm
from .combine import CombineAlgorithm
from .distance_membership import DistanceMembershipAlgorithm
from .evaluate_tree import EvaluateTreeAlgorithm
from .evidence_weights import EvidenceWeightsAlgorithm
from .holdouts import HoldoutsAlgorithm
from .membership import MembershipAlgorithm
from .monte_carlo import MonteCarloAlgorithm
from .pairwise_weights import PairwiseWeightsAlgorithm
from .posterior import PosteriorAlgorithm
from .redundancy import RedundancyAlgorithm
from .report import ReportAlgorithm
from .reproduce import ReproduceAlgorithm
from .score_sheets import ScoreSheetsAlgorithm
from .sensitivity import SensitivityAlgorithm
from .targets import TargetsAlgorithm
from .validate import ValidateAlgorithm

ALGORITHMS = (EvaluateTreeAlgorithm, MembershipAlgorithm, DistanceMembershipAlgorithm,
              CombineAlgorithm, ReproduceAlgorithm, EvidenceWeightsAlgorithm, PosteriorAlgorithm,
              ScoreSheetsAlgorithm, AggregateScoresAlgorithm, PairwiseWeightsAlgorithm,
              MonteCarloAlgorithm, SensitivityAlgorithm,
              ValidateAlgorithm, HoldoutsAlgorithm, RedundancyAlgorithm,
              TargetsAlgorithm, ReportAlgorithm)

"""Stage 2, information: the expected bits of one more velocity, or of a set of them.

Takes posterior samples (inference.Posterior), times and noise; gives predicted velocities,
one-visit and joint expected information in bits, information curves over the run, and
posteriors updated with new velocities. Imports only the sky stage and inference.
"""

from planner.information.curves import InformationCurve, build_curve
from planner.information.entropy import InformationError, mixture_entropy_bits
from planner.information.gain import conditional_bits, joint_bits, one_visit_bits
from planner.information.predict import Predictor
from planner.information.update import PosteriorUpdate, update_posterior

__all__ = [
    "build_curve",
    "conditional_bits",
    "InformationCurve",
    "InformationError",
    "joint_bits",
    "mixture_entropy_bits",
    "one_visit_bits",
    "PosteriorUpdate",
    "Predictor",
    "update_posterior",
]

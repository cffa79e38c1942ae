"""Parameter distributions and sampling designs (unit cube -> parameter sets)."""

from poise.sampling.designs import KINDS, Design, make_design, map_to_parameters
from poise.sampling.distributions import (
    DISTRIBUTIONS,
    Distribution,
    check_parameter,
    make_distribution,
)

__all__ = [
    "DISTRIBUTIONS",
    "Distribution",
    "check_parameter",
    "make_distribution",
    "KINDS",
    "Design",
    "make_design",
    "map_to_parameters",
]

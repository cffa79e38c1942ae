"""Eigenvalues of Jacobians and the classification of steady states."""

from poise.stability.classify import (
    CLASS_CODES,
    CLASS_NAMES,
    STABILITY_CODES,
    STABILITY_NAMES,
    Classification,
    classify,
    eigenvalues,
)

__all__ = ["CLASS_CODES", "CLASS_NAMES", "STABILITY_CODES", "STABILITY_NAMES",
           "Classification", "classify", "eigenvalues"]

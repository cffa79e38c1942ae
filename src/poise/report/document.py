"""The report as a list of format-neutral blocks; `markdown` and `html` render it.

Blocks hold plain text only. Renderers escape every string, ours and the user's,
so no text from a study file can turn into markup.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from .tables import Table

__all__ = ["Document", "Heading", "Paragraph", "Bullets", "TableBlock", "FigureBlock", "Block",
           "CAUTIONS", "HOW_TO_READ"]


@dataclass
class Heading:
    level: int
    text: str
    anchor: str = ""


@dataclass
class Paragraph:
    text: str
    kind: str = "plain"  # "plain" | "note" (something excluded or missing) | "lead"


@dataclass
class Bullets:
    """Items are plain strings or (term, explanation) pairs."""

    items: list
    kind: str = "plain"  # "plain" | "caution"


@dataclass
class TableBlock:
    table: Table


@dataclass
class FigureBlock:
    """A figure saved as figures/<stem>.png (and .svg)."""

    stem: str
    caption: str
    alt: str = ""


Block = Heading | Paragraph | Bullets | TableBlock | FigureBlock


CAUTIONS = [
    ("Stability is local.",
     "Each steady state is classified from its linearisation, which describes small "
     "disturbances near that steady state. It does not tell where trajectories that start "
     "far away end up, and it does not rule out cycles or other long-term behaviour."),
    ("Results are conditional.",
     "Every number here holds only for this model and the parameter distributions given in "
     "the study file. Other equations or other ranges can change every answer."),
    ("Decisions that can hurt someone need more than this report.",
     "For clinical, public-health, environmental or process-safety decisions, follow local "
     "regulations and the judgement of licensed professionals."),
]

HOW_TO_READ = [
    ("Probability of a claim:",
     "the share of the sampled parameter sets in which the claim holds. The 95 % interval "
     "shows how far that share could move through sampling noise alone; more sets make it "
     "narrower. It says nothing about errors in the model itself."),
    ("Number of stable steady states:",
     "two or more means the system can settle in different places depending on where it starts."),
    ("Steady-state label:",
     "which state variables are zero there (for example 'A>0, G=0'). Its row tells how often "
     "that steady state exists and, when it does, what kind it is."),
    ("Sobol S1 and ST:",
     "S1 is the share of the variance in whether a claim holds that one parameter causes alone; "
     "knowing that parameter exactly would remove that share on average. ST adds the "
     "parameter's joint effects with others. An ST near zero means the parameter can be fixed "
     "at its nominal value without changing the answer."),
    ("What to measure first:",
     "parameters are ranked by ST (which to pin down: the claim cannot be settled without "
     "them) and, beside it, by S1 (which alone would settle the most). When every S1 is near "
     "zero, the claim depends on combinations of parameters and the ST ranking is the one to "
     "follow."),
    ("KS distance:",
     "how differently a parameter is spread in the sets where a claim holds and in those where it "
     "fails, from 0 (no difference) to 1 (no overlap)."),
    ("Two-parameter maps:",
     "the share of sets where a claim holds in each bin of two parameters, the others averaged "
     "out; the number in a bin is how many sets it holds. A sharp change of colour marks where "
     "the claim stops holding."),
    ("Convergence:",
     "when the running estimate has flattened and its band is narrow, the sample is large enough "
     "for that claim."),
]


@dataclass
class Document:
    title: str
    blocks: list = field(default_factory=list)

    def add(self, *blocks) -> None:
        self.blocks.extend(blocks)

"""seqtest: sequential testing for controlled experiments.

Pure computation: group-sequential plans with error spending, monitoring of
interim looks, always-valid inference by the mixture SPRT, and simulation.
"""

from seqtest import spending
from seqtest.design import Plan, design

__all__ = ["Plan", "design", "spending"]
__version__ = "0.1.0"

"""seqtest: sequential testing for controlled experiments.

Pure computation: group-sequential plans with error spending, monitoring of
interim looks, always-valid inference by the mixture SPRT, and simulation.
"""

__version__ = "0.1.0"

from seqtest import spending  # noqa: E402
from seqtest.design import Plan, design  # noqa: E402
from seqtest.monitor import analyze  # noqa: E402
from seqtest.plans import plan_from_dict  # noqa: E402

__all__ = ["Plan", "analyze", "design", "plan_from_dict", "spending", "__version__"]

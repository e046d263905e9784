"""Error spending functions (public module; the implementation is
:mod:`seqtest.core.spending`)."""

from seqtest.core.spending import (
    SpendingFunction,
    by_name,
    from_dict,
    from_table,
    hwang_shih_decani,
    obrien_fleming,
    pocock,
    power_family,
)

__all__ = ["SpendingFunction", "obrien_fleming", "pocock", "hwang_shih_decani",
           "power_family", "from_table", "from_dict", "by_name"]

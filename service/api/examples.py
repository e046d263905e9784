"""Examples shown in the OpenAPI schema.

The scenario is invented: Juniper Street Bakery sells loaves online and tests a
larger "Place order" button on its checkout page against the classic one. The
metric is binary: a visitor who reaches checkout either orders or does not.
"""

from __future__ import annotations

CREATE_WITH_DESIGN = {
    "summary": "Design the plan from its inputs",
    "value": {
        "name": "Checkout: larger 'Place order' button",
        "description": "Juniper Street Bakery web shop; visitors who reach checkout.",
        "metric_kind": "binary",
        "arms": {"control": "classic-button", "treatment": "large-button"},
        "allocation": 1.0,
        "design": {
            "alpha": 0.05,
            "sides": 2,
            "power": 0.9,
            "looks": 4,
            "efficacy": "obrien-fleming-type",
            "futility": None,
            "binding": False,
        },
    },
}

CREATE_WITH_PLAN = {
    "summary": "Use a plan document written by `seqtest plan --json`",
    "value": {
        "name": "Checkout: larger 'Place order' button",
        "metric_kind": "binary",
        "arms": {"control": "classic-button", "treatment": "large-button"},
        "plan": {"kind": "group_sequential", "...": "the document as written by seqtest"},
    },
}

LOOK_BINARY = {
    "summary": "Second look: cumulative counts per arm",
    "value": {
        "totals": {
            "classic-button": {"n": 2410, "successes": 301},
            "large-button": {"n": 2395, "successes": 342},
        },
        "final": False,
    },
}

LOOK_CONTINUOUS = {
    "summary": "A continuous metric (order value), as mean and standard deviation",
    "value": {
        "totals": {
            "classic-button": {"n": 301, "mean": 18.40, "sd": 6.10},
            "large-button": {"n": 342, "mean": 18.95, "sd": 6.30},
        }
    },
}

AMENDMENT = {
    "summary": "Add a fifth look after a holiday week slowed traffic (other inputs kept)",
    "value": {
        "reason": "Holiday closure halved traffic; one more look planned, agreed by the "
        "shop's analytics lead on the weekly call.",
        "design": {"looks": 5},
    },
}

"""Examples shown in the OpenAPI schema.

The scenarios are invented. Juniper Street Bakery sells loaves online and tests a
larger "Place order" button on its checkout page against the classic one. The
metric is binary: a visitor who reaches checkout either orders or does not.

The Millbrook Tea Room's ordering app tests two new texts of its "Add to basket"
button ("Add to tray", "Order now") against the current one, with one primary metric
(visitors who order) and one guardrail (orders refunded, which must not rise): an
experiment plan with many arms and several metrics. Its design inputs are written
once, here (:data:`EXPERIMENT_DESIGN`); service/README.md shows the same.
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


# An experiment plan (seqtest.experiment_plan): the arms, the control first, and the
# metrics with their roles. The one place the examples spell out experiment metrics.
EXPERIMENT_DESIGN = {
    "kind": "experiment",
    "arms": ["basket", "add-to-tray", "order-now"],
    "metrics": [
        {"name": "orders", "kind": "binary", "baseline": 0.10, "mde": 0.03},
        {"name": "refunds", "role": "guardrail", "better": "lower",
         "kind": "binary", "baseline": 0.05, "mde": 0.03},
    ],
    "looks": 3,
}

CREATE_EXPERIMENT_PLAN = {
    "summary": "An experiment plan: three arms, a primary metric and a guardrail",
    "value": {
        "name": "Basket button: three texts",
        "description": "Millbrook Tea Room app; visitors who open a product page.",
        "design": EXPERIMENT_DESIGN,
    },
}

LOOK_EXPERIMENT = {
    "summary": "An experiment plan's look: cumulative totals per metric and arm",
    "value": {
        "totals": {
            "orders": {"basket": {"n": 1800, "successes": 181},
                       "add-to-tray": {"n": 1810, "successes": 230},
                       "order-now": {"n": 1795, "successes": 185}},
            "refunds": {"basket": {"n": 181, "successes": 9},
                        "add-to-tray": {"n": 230, "successes": 11},
                        "order-now": {"n": 185, "successes": 9}},
        },
        "final": False,
    },
}

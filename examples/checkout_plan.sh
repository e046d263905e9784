#!/bin/sh
# The stopping plan of the checkout example (see examples/README.md).
seqtest plan --alpha 0.05 --sides 2 --power 0.9 --looks 5 \
    --efficacy obrien-fleming-type --futility obrien-fleming-type \
    --metric binary --baseline 0.08 --mde 0.012 --json checkout_plan.json

"""The computation core: spending functions, boundary shapes, the recursion that gives
crossing probabilities, the boundary solvers, the continuation region and the stopping
rule, the normal-mixture formulas, and the shared vocabulary, checks, root finder and
JSON conversion. Nothing here knows about plans as documents, looks of totals, files,
HTTP or printing; everything above imports from here, never the other way round.
"""

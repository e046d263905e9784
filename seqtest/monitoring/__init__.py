"""Monitoring: look totals to statistics, the rule of each plan kind, the analysis."""

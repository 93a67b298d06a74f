"""Reports over result files: tidy tables, the tuned curve, paired differences and figures.

The console script ``assimbench-report`` (:mod:`assimbench.report.command`) ties them together.
"""

"""Trust in the numbers: measurement-system and process statistics (pure functions, no I/O).

- ``grr`` / ``grr_anova`` / ``grr_plan``: crossed gauge R&R study by the ANOVA method and the
  order in which to measure it;
- ``imr`` and ``run_rules``: individuals and moving-range control chart, run rules;
- ``capability``: Cp, Cpk (Cpu, Cpl) with confidence intervals;
- ``check_standard``: is the station's check standard still in control, and since when are
  measurements suspect.

Every function is unit-agnostic: the values, tolerances and limits handed to one call share
one unit (grams, inches, swing-weight points), and the results are in that unit.
"""

"""Control-chart factors for subgroups of size two (the moving range of two successive points).

Values from the standard table of factors for variables control charts: ASTM MNL 7A, Manual on
Presentation of Data and Control Chart Analysis, Part 3, table of control-chart factors; the same
figures are in Montgomery, Introduction to Statistical Quality Control, Appendix Table VI
(table numbers from memory; the values are the standard ones for n = 2).
"""

from __future__ import annotations

D2_N2 = 1.128  # d2: E[range] / sigma for two normal observations (1.12838 = 2 / sqrt(pi))
D3_N2 = 0.0  # D3: lower moving-range limit factor (zero below n = 7)
D4_N2 = 3.267  # D4: upper moving-range limit factor, 1 + 3 d3 / d2 with d3 = 0.853

"""Statistics on plain arrays (numpy/scipy only; no event log, rule or model).

``inference``: AUC, DeLong, kappa, corrected resampled t-test, student bootstrap, Holm.
``regression``: logistic and least-squares fits, nested comparisons.
``validity``: partial and student-bootstrap correlations, standalone association, spread across populations.
"""

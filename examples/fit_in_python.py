"""Fit an example target from Python and look at the results (invented data).

Run from the repository root:  python examples/fit_in_python.py
"""

from pathlib import Path

import orbitmass

fit = orbitmass.Fit(seed=1).fit(Path(__file__).parent / "tessaly" / "target.toml")
table = fit.summary_table()
print(table.loc[["mass_msun", "distance_pc", "B.period_yr", "B.eccentricity"], ["unit", "median", "q16", "q84"]])
print("converged:", fit.summary["diagnostics"]["converged"])
fit.corner().savefig("tessaly-corner.png")
fit.save("tessaly-run", overwrite=True)  # summary.json, posterior.h5, report.md/html, figures, tables
again = orbitmass.load("tessaly-run")  # no refit
print(again.summary["derived"]["mass_msun"])

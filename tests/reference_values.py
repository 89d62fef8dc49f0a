"""Published or independently reproduced Weibull results used by tests/test_life_model.py.

Each number has its source beside it. Numbers were taken from /work/shared/reference/README.md, which
cites the publications; none were read from the publications themselves here. "Computed" means the
reference README reports the value as computed/reproduced rather than printed in the source.
"""

import csv
from pathlib import Path

import numpy as np

from warranty_forecast.lifecore.data import LifeData

# The reference files are copied into the repository (tests/data/README.md says from where), so the
# tests never read outside it; a missing copy is a failure, not a skip.
LOCAL_DATA = Path(__file__).resolve().parent / "data"

# NIST/SEMATECH e-Handbook of Statistical Methods, section 8.4.1.3 (Weibull maximum likelihood example):
# 20 units, 10 failures, 10 suspensions at 500 hours; all values published, hours scale.
NIST_SHAPE = 1.7208  # published, 4 decimals
NIST_SCALE = 606.5280  # published, 4 decimals (hours)
NIST_LOG_LIKELIHOOD = -75.135  # published, 3 decimals (exact-failure densities included, hours)
NIST_MEAN = 540.737  # published, 3 decimals (hours)
NIST_SD = 323.806  # published, 3 decimals (hours)

# Bearing cage field data: Abernethy, Breneman, Medlin & Reinman (1983), Weibull Analysis Handbook,
# AFWAL-TR-83-2079; analysed in Meeker & Escobar (1998), Statistical Methods for Reliability Data,
# chapters 8 and 12. 1,703 units, 6 failures; hours scale.
BEARING_SHAPE = 2.035319  # R survreg output printed in public package documentation (per reference README)
BEARING_SCALE = 11792.18  # same source (hours)
BEARING_LOG_LIKELIHOOD = -76.437  # per reference README: hours scale, densities included
BEARING_B10 = 3903.0  # "about 3,903 hours" per reference README (computed)
BEARING_B10_WALD_95 = (1489.0, 10234.0)  # 95% Wald, log scale: "about", computed (reference README)
# Meeker & Escobar (1998), Table 12.1: expected new failures if every surviving unit runs 300 more hours.
BEARING_NEW_FAILURES_300H = 5.058  # computed per reference README; the book prints 5.057 (from memory)


def reference_life_data(name: str) -> LifeData:
    """Load a reference CSV (hours,count,kind) from its copy in tests/data."""
    with (LOCAL_DATA / name).open(newline="") as handle:
        rows = list(csv.DictReader(handle))
    hours = np.array([float(r["hours"]) for r in rows])
    counts = np.array([float(r["count"]) for r in rows])
    failed = np.array([r["kind"] == "failure" for r in rows])
    assert set(r["kind"] for r in rows) == {"failure", "suspension"}
    return LifeData.from_exact(hours[failed], counts[failed], hours[~failed], counts[~failed])


# Likelihood-ratio (profile likelihood) bounds, used by tests/test_profile_bounds.py.
# Bearing cage, 95% likelihood-ratio interval for B10: "about [2,094, 22,144] hours", computed per the
# reference README; the book's figure (Meeker & Escobar 1998, analysing Abernethy et al. 1983), from
# memory, is about [2,093, 22,144].
BEARING_B10_LR_95 = (2094.0, 22144.0)

"""The F distribution's upper tail (the first stage's p-value), computed without scipy."""

from __future__ import annotations

import math
import subprocess
import sys

import pytest
from scipy import special

from demandprep.instruments.f_distribution import f_survival

DEGREES = [1, 2, 3, 7, 30, 250, 10_000, 2_000_000]
F_VALUES = [0.0, 1e-6, 0.05, 0.5, 1.0, 1.7, 4.0, 12.5, 80.0, 3_000.0]


@pytest.mark.parametrize("df_num", DEGREES[:6])
@pytest.mark.parametrize("df_den", DEGREES)
def test_f_survival_equals_scipy(df_num, df_den):
    for f_value in F_VALUES:
        # reference: scipy.special.fdtrc, the F survival function scipy.stats.f.sf calls
        expected = float(special.fdtrc(df_num, df_den, f_value))
        # ln B(a, b) from math.lgamma carries about 1e-16 of lgamma(a + b) in absolute terms,
        # so the relative error grows with the degrees of freedom: some 1e-9 at two million
        tolerance = max(1e-9, 1e-15 * math.lgamma((df_num + df_den) / 2))
        assert f_survival(df_num, df_den, f_value) == pytest.approx(
            expected, rel=tolerance, abs=1e-300
        ), (df_num, df_den, f_value)


def test_f_survival_is_one_at_zero_and_falls_to_zero():
    assert f_survival(3, 40, 0.0) == 1.0
    assert f_survival(3, 40, 1e9) < 1e-100


def test_building_imports_no_scipy():
    # a fresh interpreter: every module a build and its export load, and no scipy among them
    probe = (
        "import sys\n"
        "import demandprep.cli, demandprep.pipeline, demandprep.ingest.runner\n"
        "import demandprep.stages, demandprep.export.folder, demandprep.export.build\n"
        "print(sorted({name.split('.')[0] for name in sys.modules} & {'scipy'}))\n"
    )
    result = subprocess.run(
        [sys.executable, "-c", probe], capture_output=True, text=True, check=True
    )
    assert result.stdout.strip() == "[]"

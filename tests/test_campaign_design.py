"""Campaign run records (kinetics.campaign.design): validated once, clear messages naming the
run and the factor."""

from __future__ import annotations

import numpy as np
import pytest

from kinetics.campaign import CampaignRun, check_campaign, varied_factors
from kinetics.errors import ConfigError, InputFileError

T = np.array([10.0, 20.0, 30.0, 40.0])
A = np.array([0.09, 0.08, 0.07, 0.06])


def test_a_valid_run_is_frozen_and_answers_factor_questions():
    run = CampaignRun("r1", T, {"A": A}, {"A": 0.001}, {"A": 0.1, "B": 0.2}, 0.01, 298.15, {"stirring_rpm": 600})
    assert run.sigma("A").shape == T.shape and run.sigma("B") is None
    assert run.factor("B") == 0.2 and run.factor("catalyst") == 0.01 and run.factor("stirring_rpm") == 600.0
    with pytest.raises(ValueError):
        run.time_s[0] = 5.0  # arrays are read-only
    with pytest.raises(TypeError):
        run.initial_mol_per_l["A"] = 1.0


@pytest.mark.parametrize("kwargs,error,match", [
    ({"time_s": [10.0, 5.0, 30.0, 40.0]}, InputFileError, r"run 'r1': times must increase strictly; row 2"),
    ({"time_s": [10.0, np.nan, 30.0, 40.0]}, InputFileError, "run 'r1': the time column has a missing"),
    ({"observed_mol_per_l": {"A": A[:3]}}, InputFileError, "species 'A' has 3 values for 4 times"),
    ({"sigma_mol_per_l": {"A": -1.0}}, InputFileError, "sigma of 'A' must be finite and above 0"),
    ({"initial_mol_per_l": {"B": -0.2}}, ConfigError, r"runs\.r1\.initial\.B.*negative"),
    ({"initial_mol_per_l": {"B": "lots"}}, ConfigError, r"runs\.r1\.initial\.B.*not a number"),
    ({"temperature_kelvin": 25.0}, ConfigError, r"runs\.r1\.temperature_kelvin.*298\.15 K"),
    ({"catalyst_mol_per_l": float("inf")}, ConfigError, r"runs\.r1\.catalyst_mol_per_l.*not a finite"),
])
def test_invalid_runs_name_the_run_and_the_factor(kwargs, error, match):
    base = {"label": "r1", "time_s": T, "observed_mol_per_l": {"A": A}}
    base.update(kwargs)
    with pytest.raises(error, match=match):
        CampaignRun(**base)


def test_campaign_checks_labels_and_varied_factors():
    one = CampaignRun("r1", T, {"A": A}, {}, {"A": 0.1, "B": 0.2}, 0.01)
    two = CampaignRun("r2", T, {"A": A}, {}, {"A": 0.1, "B": 0.4}, 0.01)
    assert varied_factors([one, two], ["A", "B", "catalyst"]) == {"A": False, "B": True, "catalyst": False}
    with pytest.raises(ConfigError, match="two runs have this label"):
        check_campaign([one, CampaignRun("r1", T, {"A": A})])

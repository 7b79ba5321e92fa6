"""The shipped default correction in models/default: loads, reproduces its own sample, fits its limits."""

from pathlib import Path

import numpy as np
import pytest

from surrogate3d.runtime import load_coefficients

SHIPPED = Path(__file__).resolve().parents[1] / "models" / "default"
#: Size limits of the export issue: ridge at most 20 kB, the default tree ensemble at most 250 kB.
LIMITS = {"ridge": 20_000, "boosted": 250_000}


def _matrix(path, skip_header):
    rows = path.read_text().splitlines()[1 if skip_header else 0:]
    return np.array([[float(v) for v in row.split()] for row in rows if row.strip()])


@pytest.mark.parametrize("name", sorted(LIMITS))
def test_shipped_model_reproduces_its_sample_corrections(name):
    model = load_coefficients(SHIPPED / f"{name}.coefficients.json")
    features = _matrix(SHIPPED / "fortran" / f"{name}_sample_features.txt", skip_header=True)
    expected = _matrix(SHIPPED / "fortran" / f"{name}_sample_corrections.txt", skip_header=False)
    np.testing.assert_allclose(model.predict(features), expected, rtol=1e-12, atol=1e-15)
    assert list(model.target_names) == ["surface_downward_flux", "surface_downward_direct_flux",
                                        "surface_downward_diffuse_flux", "toa_upward_flux", "atmosphere_absorption"]


@pytest.mark.parametrize("name", sorted(LIMITS))
def test_shipped_files_fit_their_size_limits(name):
    for suffix in (".json", ".nc"):
        assert (SHIPPED / f"{name}.coefficients{suffix}").stat().st_size <= LIMITS[name]


def test_model_card_states_what_a_user_must_know():
    card = (SHIPPED / "MODEL_CARD.md").read_text()
    for needed in ("Training scenes", "Regimes", "Resolution", "Solar zenith", "Held-out skill", "Limits of validity",
                   "validated for the host model"):
        assert needed in card, needed

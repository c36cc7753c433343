"""Phantom cases rendered once per test session (each takes about a second)."""

import pytest

from explain.phantom import LesionSpec, make_phantom

# Lesions placed by hand away from branch origins, so a neighbour's lumen cannot fill them.
STENOSES = (
    LesionSpec(2, 50, "soft", 11.0, 12.0, eccentric=True),
    LesionSpec(11, 60, "soft", 10.0, 12.0, eccentric=True),
    LesionSpec(3, 30, "soft", 10.0, 12.0, eccentric=False),
    LesionSpec(1, 80, "soft", 11.0, 12.0, eccentric=False),
    LesionSpec(7, 100, "soft", None, 10.0, eccentric=True),
)
PLAQUES = (
    LesionSpec(1, 80, "soft", 11.0, 10.0, eccentric=False),
    LesionSpec(6, 80, "calcified", 9.0, 8.0, eccentric=False),
)


@pytest.fixture(scope="session")
def nominal_case():
    """The nominal tree (no random variation), no lesions, with blur and noise."""
    return make_phantom(seed=0, variation=0.0)


@pytest.fixture(scope="session")
def random_cases():
    """Three seeds with the default anatomical spread."""
    return [make_phantom(seed=s) for s in (1, 2, 3)]


@pytest.fixture(scope="session")
def plaque_case():
    return make_phantom(seed=0, variation=0.0, lesions=PLAQUES)


@pytest.fixture(scope="session")
def stenosis_realistic():
    return make_phantom(seed=4, lesions=STENOSES)


@pytest.fixture(scope="session")
def stenosis_geometric():
    """No blur, no noise: only the drawn geometry and its one-voxel partial-volume ramp."""
    return make_phantom(seed=4, lesions=STENOSES, noise_sd_hu=0.0, blur_sigma_mm=0.0)

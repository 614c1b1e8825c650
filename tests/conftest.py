"""Shared fixtures."""

import pytest

import circlesim as cs


@pytest.fixture
def adult() -> cs.Patient:
    """A 70 kg, 175 cm, 40-year-old man (the textbook reference adult)."""
    return cs.Patient(weight_kg=70.0, height_cm=175.0, age_years=40.0, sex="male")

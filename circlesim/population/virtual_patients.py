"""Virtual patients: who is in a population, drawn from stated distributions with a seed.

A :class:`PopulationSpec` lists one distribution per quantity, each with its source (a citation,
or "assumption" where the spread is circlesim's choice):

* sex, age, height (by sex) and body-mass index (by sex) — or weight directly;
* multiplicative factors on the patient's default cardiac output, FRC and oxygen consumption
  (the rules in :data:`circlesim.domain.patient.RULES`);
* the PaCO2 the ventilation aims at (alveolar ventilation varies inversely with it);
* a factor on every blood/gas partition coefficient (``Patient.solubility_scale``).

:func:`sample_patients` draws ``n`` patients; the same seed gives the same patients. A
distribution that can give an impossible value (a negative weight, an age beyond the model's
range) is refused when the spec is made, naming the field and the allowed range; a drawn
patient that is impossible for another reason (a factor pushing cardiac output out of range) is
refused when drawn, naming the patient and the field.
"""

from __future__ import annotations

import os
import tomllib
from dataclasses import dataclass, fields
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from circlesim.base.validation import InputError, Interval, check_keys, check_whole_number
from circlesim.domain.patient import Patient
from circlesim.population.distributions import (
    Distribution,
    Fixed,
    LogNormal,
    Normal,
    Uniform,
    distribution_from_dict,
)
from circlesim.properties import BLOOD_GAS_SOURCES

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

__all__ = ["MAX_PATIENTS", "PopulationSpec", "VirtualPatients", "check_patient_count",
           "load_population_spec", "sample_patients"]

#: Largest population circlesim draws in one go.
MAX_PATIENTS = 1_000_000

_FLEGAL = ("Flegal KM, Int J Obes 2006;30:374-9 (NHANES III, healthy non-smoking US adults): "
           "median BMI {median} kg/m², 90 % within {range} kg/m² (log-normal fitted to these)")
_FRYAR = ("adult height in Fryar CD et al., Natl Health Stat Report 2018;122 (NHANES 2015-16): "
          "mean {mean} cm, SD {sd} cm (both from memory)")


#: Default distributions of :class:`PopulationSpec` (adults), each with its source.
DEFAULT_FEMALE_FRACTION = Fixed(0.5, "assumption: equal numbers of women and men")
DEFAULT_AGE = Uniform(18.0, 80.0, "assumption: adults on a general operating list; set your "
                                  "own")
DEFAULT_HEIGHT_MALE = Normal(175.7, 7.5, 150.0, 205.0, _FRYAR.format(mean=175.7, sd=7.5))
DEFAULT_HEIGHT_FEMALE = Normal(161.8, 7.0, 138.0, 190.0, _FRYAR.format(mean=161.8, sd=7.0))
DEFAULT_BMI_MALE = LogNormal(24.5, 0.13, 16.0, 45.0, _FLEGAL.format(median=24.5, range="19.5–30"))
DEFAULT_BMI_FEMALE = LogNormal(21.5, 0.16, 15.0, 45.0, _FLEGAL.format(median=21.5, range="18–30"))
DEFAULT_CARDIAC_OUTPUT_FACTOR = LogNormal(
    1.0, 0.20, 0.5, 2.0, "assumption: SD about 20 % around the allometric rule")
DEFAULT_FRC_FACTOR = LogNormal(
    1.0, 0.20, 0.5, 1.8, "residual SD of adult FRC reference equations 0.5-0.6 L, about 18 % "
                         "(Quanjer et al., Eur Respir J 1993;6 Suppl 16, from memory), rounded up "
                         "for the variable fall under anaesthesia (Wahba, Can J Anaesth "
                         "1991;38:384-400)")
DEFAULT_VO2_FACTOR = LogNormal(
    1.0, 0.15, 0.6, 1.6, "assumption, spanning O2 uptake under anaesthesia of 84-100 % of "
                         "predicted basal (Theye & Tuohy, Anesthesiology 1964) and a fall of 65 "
                         "(95 % CI 55-75) mL/min at induction (Jakobsson et al., Acta Anaesthesiol "
                         "Scand 2019)")
DEFAULT_PACO2 = Normal(5.3, 0.35, 4.5, 6.0, "common practice: ventilation set for PaCO2 "
                                            "4.5-6.0 kPa (34-45 mmHg)")
DEFAULT_SOLUBILITY_SCALE = LogNormal(
    1.0, 0.08, 0.75, 1.3, "Esper et al., Anesth Analg 2015;120:45-50: between-patient SD of "
                          "blood/gas coefficients 7-8 % of the mean (isoflurane 1.45 ± 0.12, "
                          "sevoflurane 0.74 ± 0.06, desflurane 0.57 ± 0.04)")


def _patient_interval(name: str) -> Interval:
    for f in fields(Patient):
        if f.name == name:
            return f.metadata["constraint"]
    raise KeyError(name)  # pragma: no cover


@dataclass(frozen=True)
class PopulationSpec:
    """Distributions of a virtual-patient population, each with its source.

    Parameters
    ----------
    female_fraction : Fixed, 0–1
        Share of women.
    age_years : Distribution, years, within 1–110
    height_cm_male, height_cm_female : Distribution, cm, within 45–230
    bmi_male, bmi_female : Distribution, kg/m², positive
        Body-mass index; weight = BMI × height².
    weight_kg : Distribution or None, kg, within 2–250
        Weight drawn directly instead of from BMI and height.
    cardiac_output_factor, frc_factor, vo2_factor : Distribution, positive
        Multiply the patient's default cardiac output, FRC and O2 consumption.
    paco2_target_kpa : Distribution, kPa, within 3–10
        PaCO2 the default ventilation aims at (alveolar ventilation ∝ 1 / PaCO2).
    solubility_scale : Distribution, within 0.5–2
        Multiplies every blood/gas partition coefficient.
    intertissue_diffusion : bool
        Passed to every patient.
    blood_gas_source : {"textbook", "esper2015"}
        Passed to every patient.
    """

    female_fraction: Fixed = DEFAULT_FEMALE_FRACTION
    age_years: Distribution = DEFAULT_AGE
    height_cm_male: Distribution = DEFAULT_HEIGHT_MALE
    height_cm_female: Distribution = DEFAULT_HEIGHT_FEMALE
    bmi_male: Distribution = DEFAULT_BMI_MALE
    bmi_female: Distribution = DEFAULT_BMI_FEMALE
    weight_kg: Distribution | None = None
    cardiac_output_factor: Distribution = DEFAULT_CARDIAC_OUTPUT_FACTOR
    frc_factor: Distribution = DEFAULT_FRC_FACTOR
    vo2_factor: Distribution = DEFAULT_VO2_FACTOR
    paco2_target_kpa: Distribution = DEFAULT_PACO2
    solubility_scale: Distribution = DEFAULT_SOLUBILITY_SCALE
    intertissue_diffusion: bool = True
    blood_gas_source: str = "textbook"

    def __post_init__(self) -> None:
        for f in fields(self):
            value = getattr(self, f.name)
            if f.name in ("intertissue_diffusion", "blood_gas_source"):
                continue
            if value is None and f.name == "weight_kg":
                continue
            if not isinstance(value, Distribution):
                raise InputError(f"PopulationSpec.{f.name} must be a distribution (Normal, "
                                 f"LogNormal, Uniform or Fixed); got {value!r}.")
        if not isinstance(self.female_fraction, Fixed) or not 0.0 <= self.female_fraction.value \
                <= 1.0:
            raise InputError("PopulationSpec.female_fraction must be a fixed share from 0 to 1; "
                             f"got {self.female_fraction!r}.")
        if not isinstance(self.intertissue_diffusion, bool):
            raise InputError("PopulationSpec.intertissue_diffusion must be true or false; got "
                             f"{self.intertissue_diffusion!r}.")
        if self.blood_gas_source not in BLOOD_GAS_SOURCES:
            raise InputError(f"PopulationSpec.blood_gas_source must be one of "
                             f"{', '.join(map(repr, BLOOD_GAS_SOURCES))}; got "
                             f"{self.blood_gas_source!r}.")
        direct = {"age_years": "age_years", "height_cm_male": "height_cm",
                  "height_cm_female": "height_cm", "weight_kg": "weight_kg",
                  "paco2_target_kpa": "paco2_target_kpa",
                  "solubility_scale": "solubility_scale"}
        for name, field_name in direct.items():
            dist = getattr(self, name)
            if dist is None:
                continue
            interval = _patient_interval(field_name)
            low, high = dist.support()
            if not (interval.contains(low) and interval.contains(high)):
                raise InputError(
                    f"PopulationSpec.{name} ({dist.describe()}) can give values outside what a "
                    f"patient can have: Patient.{field_name} must be {interval.describe()}. "
                    "Give the distribution bounds (low, high) within that range.")
        for name in ("bmi_male", "bmi_female", "cardiac_output_factor", "frc_factor",
                     "vo2_factor"):
            dist = getattr(self, name)
            if not dist.support()[0] > 0.0:
                raise InputError(
                    f"PopulationSpec.{name} ({dist.describe()}) can give values of zero or "
                    "below, which no patient can have; give it a lower bound (low) above 0 "
                    "or use a log-normal distribution.")

    # ---- plain data ---------------------------------------------------------------------
    def to_dict(self) -> dict:
        """Plain data (the TOML layout of :func:`load_population_spec`)."""
        out: dict[str, Any] = {}
        for f in fields(self):
            value = getattr(self, f.name)
            if value is None:
                continue
            out[f.name] = value.to_dict() if isinstance(value, Distribution) else value
        return out

    @classmethod
    def from_dict(cls, data: Any, where: str = "population") -> PopulationSpec:
        """A spec from plain data; quantities left out keep their defaults."""
        if not isinstance(data, dict):
            raise InputError(f"{where} must be a table; got {data!r}.")
        check_keys(where, data, (f.name for f in fields(cls)))
        kwargs: dict[str, Any] = {}
        for key, value in data.items():
            if key in ("intertissue_diffusion", "blood_gas_source"):
                kwargs[key] = value
            elif key == "female_fraction" and isinstance(value, int | float) \
                    and not isinstance(value, bool):
                kwargs[key] = Fixed(float(value), "given")
            else:
                kwargs[key] = distribution_from_dict(value, f"{where}.{key}")
        try:
            return cls(**kwargs)
        except InputError as exc:
            raise InputError(f"{where}: {exc}") from None

    def table(self) -> pd.DataFrame:
        """One row per quantity: what it sets, its distribution and its source."""
        import pandas as pd

        rows = []
        for f in fields(self):
            value = getattr(self, f.name)
            if isinstance(value, Distribution):
                rows.append({"quantity": f.name, "distribution": value.describe(),
                             "source": value.source})
            elif f.name == "weight_kg":
                rows.append({"quantity": f.name, "distribution": "BMI × height²",
                             "source": "from the BMI and height distributions"})
        return pd.DataFrame(rows)

    # ---- patients -----------------------------------------------------------------------
    def typical_patient(self) -> Patient:
        """The patient with the median of every distribution (a man unless most are women)."""
        female = self.female_fraction.value > 0.5
        height = (self.height_cm_female if female else self.height_cm_male).median()
        if self.weight_kg is None:
            bmi = (self.bmi_female if female else self.bmi_male).median()
            weight = bmi * (height / 100.0) ** 2
        else:
            weight = self.weight_kg.median()
        return _make_patient(self, "typical patient", "female" if female else "male",
                             self.age_years.median(), height, weight,
                             self.paco2_target_kpa.median(), self.solubility_scale.median(),
                             self.cardiac_output_factor.median(), self.frc_factor.median(),
                             self.vo2_factor.median())


def load_population_spec(path: str | os.PathLike) -> PopulationSpec:
    """Read a :class:`PopulationSpec` from a TOML file (one table per quantity)::

        female_fraction = 0.3
        [age_years]
        kind = "uniform"
        low = 65
        high = 90
        source = "our elderly list (assumption)"
    """
    path = Path(path)
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise InputError(f"population file {path} does not exist.") from None
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"{path} is not valid TOML: {exc}.") from None
    return PopulationSpec.from_dict(data, str(path))


def _make_patient(spec: PopulationSpec, who: str, sex: str, age: float, height: float,
                  weight: float, paco2: float, solubility: float, co_factor: float,
                  frc_factor: float, vo2_factor: float) -> Patient:
    try:
        base = Patient(weight_kg=float(weight), height_cm=float(height), age_years=float(age),
                       sex=sex, paco2_target_kpa=float(paco2),
                       solubility_scale=float(solubility),
                       intertissue_diffusion=spec.intertissue_diffusion,
                       blood_gas_source=spec.blood_gas_source)
        return base.with_changes(cardiac_output_l_min=float(co_factor) * base.cardiac_output,
                                 frc_l=float(frc_factor) * base.frc,
                                 vo2_ml_min=float(vo2_factor) * base.vo2)
    except InputError as exc:
        raise InputError(f"{who}, drawn from the population distributions, is not a possible "
                         f"patient: {exc} Narrow or bound the distribution that gave it "
                         "(see PopulationSpec).") from None


def check_patient_count(n: Any, name: str = "patients") -> int:
    """Return ``n`` as an int if it is a whole number from 1 to :data:`MAX_PATIENTS`."""
    return check_whole_number(name, n, Interval(1, MAX_PATIENTS))


def _check_seed(seed: Any) -> int:
    if seed is None:
        return int(np.random.SeedSequence().entropy)
    if isinstance(seed, bool) or not isinstance(seed, int | np.integer) or seed < 0:
        raise InputError(f"seed must be a whole number of at least 0 (or None for a fresh "
                         f"one); got {seed!r}.")
    return int(seed)


@dataclass(frozen=True, eq=False)
class VirtualPatients:
    """A drawn population.

    Attributes
    ----------
    patients : tuple of Patient
    seed : int or None
        Seed that reproduces the draw with :attr:`spec` (None: patients given directly).
    spec : PopulationSpec or None
    """

    patients: tuple[Patient, ...]
    seed: int | None = None
    spec: PopulationSpec | None = None

    def __len__(self) -> int:
        return len(self.patients)

    def __iter__(self):
        return iter(self.patients)

    def __getitem__(self, index):
        return self.patients[index]

    def table(self) -> pd.DataFrame:
        """One row per patient: body size and the physiology the model used."""
        import pandas as pd

        rows = []
        for p in self.patients:
            rows.append({"sex": p.sex, "age_years": p.age_years, "height_cm": p.height_cm,
                         **p.describe(), "paco2_target_kpa": p.paco2_target_kpa,
                         "solubility_scale": p.solubility_scale})
        return pd.DataFrame(rows)


def sample_patients(n: int, spec: PopulationSpec | None = None,
                    seed: int | None = None) -> VirtualPatients:
    """Draw ``n`` virtual patients from ``spec``.

    Parameters
    ----------
    n : int, 1–1,000,000
    spec : PopulationSpec, optional
        Default: :class:`PopulationSpec` with its defaults (adults).
    seed : int ≥ 0 or None
        The same seed and spec give the same patients. None draws a fresh seed, recorded in
        the result so the draw can be repeated.

    Raises
    ------
    InputError
        For a bad count or seed, or a drawn patient outside the model's ranges.
    """
    n = check_patient_count(n)
    spec = PopulationSpec() if spec is None else spec
    if not isinstance(spec, PopulationSpec):
        raise InputError(f"spec must be a PopulationSpec; got {type(spec).__name__}.")
    seed = _check_seed(seed)
    rng = np.random.default_rng(seed)
    female = rng.random(n) < spec.female_fraction.value
    age = spec.age_years.sample(rng, n)
    height = np.where(female, spec.height_cm_female.sample(rng, n),
                      spec.height_cm_male.sample(rng, n))
    if spec.weight_kg is None:
        bmi = np.where(female, spec.bmi_female.sample(rng, n), spec.bmi_male.sample(rng, n))
        weight = bmi * (height / 100.0) ** 2
    else:
        weight = spec.weight_kg.sample(rng, n)
    co = spec.cardiac_output_factor.sample(rng, n)
    paco2 = spec.paco2_target_kpa.sample(rng, n)
    frc = spec.frc_factor.sample(rng, n)
    solubility = spec.solubility_scale.sample(rng, n)
    vo2 = spec.vo2_factor.sample(rng, n)
    patients = tuple(
        _make_patient(spec, f"virtual patient {i}", "female" if female[i] else "male", age[i],
                      height[i], weight[i], paco2[i], solubility[i], co[i], frc[i], vo2[i])
        for i in range(n))
    return VirtualPatients(patients, seed, spec)


"""The patient: body size to physiology, each default by a cited rule, every one overridable.

Gas volumes follow :mod:`circlesim.base.units`: VO2 and VCO2 in mL/min STPD, ventilation and FRC at
BTPS, cardiac output in L/min of blood.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

from circlesim.base.units import KPA_PER_MMHG
from circlesim.base.validation import InputError, OneOf, bounded, check_fields, optional_bounded
from circlesim.properties import BLOOD_GAS_SOURCES

__all__ = ["RULES", "Patient", "TissueGroup"]

#: The published rules behind each default, shown by :meth:`Patient.describe`.
RULES = {
    "vo2": "Brody/Kleiber basal rule 10 × kg^0.75 mL/min (Lowe & Ernst, The Quantitative "
           "Practice of Anesthesia, 1981) × anaesthesia factor 0.85 (Theye & Tuohy, "
           "Anesthesiology 1964: O2 uptake 84 % of predicted basal under light halothane with "
           "paralysis; Jakobsson et al., Acta Anaesthesiol Scand 2019 meta-analysis: −65 mL/min)",
    "vco2": "respiratory quotient 0.8 × VO2 (Lowe & Ernst 1981: 8 × kg^0.75 mL/min)",
    "cardiac_output": "2 × kg^0.75 dL/min (Lowe & Ernst 1981, memory)",
    "alveolar_ventilation": "alveolar ventilation equation VA = 0.863 × VCO2 / PaCO2 for "
                            "PaCO2 5.3 kPa (40 mmHg)",
    "dead_space": "anatomical dead space ≈ 1 mL per lb body weight = 2.2 mL/kg (Radford, "
                  "J Appl Physiol 1955;7:451-60)",
    "frc": "adults: Crapo et al., Bull Eur Physiopathol Respir 1982;18:419-25 (FRC from height "
           "and age); children under 16: 30 mL/kg (common practice); × 0.8 under general "
           "anaesthesia supine (Wahba, Can J Anaesth 1991;38:384-400); × exp(−0.0288 (BMI − 20)) "
           "above BMI 20 (Jones & Nzekwu, Chest 2006;130:827-33: FRC at BMI 30 is 75 % of BMI 20)",
    "body_fat": "Deurenberg et al., Br J Nutr 1991;65:105-14: body fat % = 1.2 BMI + 0.23 age "
                "− 10.8 (male) − 5.4 for age ≥ 16; 1.51 BMI − 0.70 age − 3.6 (male) + 1.4 "
                "below 16 (memory)",
    "tissue_groups": "lean mass: vessel-rich 12.5 %, muscle 62.5 %, vessel-poor 25 % (Eger, "
                     "Anesthetic Uptake and Action 1974: VRG 10 %, muscle 50 %, fat 20 %, "
                     "vessel-poor 20 % of a 70 kg body; memory). Cardiac output: fat receives "
                     "0.0202 L/min per kg of fat (6 % of output in the 70 kg reference), the "
                     "rest goes 75 : 19 to vessel-rich and muscle (Eger 1974, memory)",
    "intertissue": "muscle exchanges agent by diffusion with the quarter of body fat that lies "
                   "against it (Eger & Saidman, Anesth Analg 2005;100:1020-33 describe the "
                   "path; the 25 % share and the 27 min diffusion time are circlesim's physical "
                   "estimate, see docs/model.md)",
}

#: Plausible body-mass index range, kg/m² (common practice: below about 10 is starvation,
#: above 80 is rarely seen).
MIN_BMI = 8.0
MAX_BMI = 90.0

_LEAN_SHARE_VESSEL_RICH = 0.125
_LEAN_SHARE_MUSCLE = 0.625
_FAT_PERFUSION_L_MIN_KG = 0.0202
_FLOW_RATIO_VESSEL_RICH = 75.0 / (75.0 + 19.0)
_ANAESTHESIA_VO2_FACTOR = 0.85


@dataclass(frozen=True)
class TissueGroup:
    """One tissue compartment of the patient.

    Attributes
    ----------
    name : str
        "vessel_rich", "muscle", "fat" or "fat_next_to_muscle".
    label : str
        Display name.
    volume_l : float
        Tissue volume, L (1 kg ≈ 1 L).
    blood_flow_l_min : float
        Blood flow, L/min.
    partition : str
        Which tissue/blood coefficient applies: "brain", "muscle" or "fat".
    """

    name: str
    label: str
    volume_l: float
    blood_flow_l_min: float
    partition: str


@dataclass(frozen=True)
class Patient:
    """A patient, from body size to the physiology the model needs.

    Parameters
    ----------
    weight_kg : float, kg, 2–250
    height_cm : float, cm, 45–230
    age_years : float, years, 1–110 (Mapleson's MAC–age relation holds above 1 year)
    sex : {"female", "male"}
    vo2_ml_min : float or None, mL/min STPD, 5–1500
        Oxygen consumption under anaesthesia. Default: Brody's rule × 0.85 (see ``RULES``).
    vco2_ml_min : float or None, mL/min STPD, 4–1500
        CO2 production. Default: 0.8 × VO2.
    cardiac_output_l_min : float or None, L/min, 0.2–20
    frc_l : float or None, L BTPS, 0.05–6
        Functional residual capacity under anaesthesia (the alveolar gas volume).
    dead_space_ml : float or None, mL BTPS, 5–500
        Anatomical plus apparatus dead space.
    body_fat_fraction : float or None, 0.03–0.7
    paco2_target_kpa : float, kPa, 3–10
        PaCO2 aimed at by the default ventilation.
    shunt_fraction : float, 0–0.5
        Fraction of cardiac output that bypasses ventilated alveoli.
    blood_gas_source : {"textbook", "esper2015"}
        Which published blood/gas partition coefficients to use.
    solubility_scale : float, 0.5–2
        Multiplies every blood/gas coefficient (for population variability).
    intertissue_diffusion : bool
        Include the muscle-to-adjacent-fat diffusion path (default on).
    """

    weight_kg: float = field(default=70.0, metadata=bounded(2.0, 250.0, "kg"))
    height_cm: float = field(default=175.0, metadata=bounded(45.0, 230.0, "cm"))
    age_years: float = field(default=40.0, metadata=bounded(1.0, 110.0, "years"))
    sex: str = field(default="male", metadata={"constraint": OneOf(("female", "male"))})
    vo2_ml_min: float | None = field(default=None, metadata=optional_bounded(5.0, 1500.0,
                                                                               "mL/min"))
    vco2_ml_min: float | None = field(default=None, metadata=optional_bounded(4.0, 1500.0,
                                                                                "mL/min"))
    cardiac_output_l_min: float | None = field(default=None,
                                               metadata=optional_bounded(0.2, 20.0, "L/min"))
    frc_l: float | None = field(default=None, metadata=optional_bounded(0.05, 6.0, "L"))
    dead_space_ml: float | None = field(default=None, metadata=optional_bounded(5.0, 500.0,
                                                                                   "mL"))
    body_fat_fraction: float | None = field(default=None,
                                            metadata=optional_bounded(0.03, 0.7))
    paco2_target_kpa: float = field(default=5.3, metadata=bounded(3.0, 10.0, "kPa"))
    shunt_fraction: float = field(default=0.0, metadata=bounded(0.0, 0.5))
    blood_gas_source: str = field(default="textbook",
                                  metadata={"constraint": OneOf(BLOOD_GAS_SOURCES)})
    solubility_scale: float = field(default=1.0, metadata=bounded(0.5, 2.0))
    intertissue_diffusion: bool = True

    def __post_init__(self) -> None:
        check_fields(self)
        if not MIN_BMI <= self.bmi <= MAX_BMI:
            raise InputError(
                f"Patient weight_kg and height_cm give a body-mass index of {self.bmi:.1f} kg/m²; "
                f"it must be from {MIN_BMI:g} to {MAX_BMI:g} kg/m² (got {self.weight_kg:g} kg "
                f"and {self.height_cm:g} cm).")
        if not isinstance(self.intertissue_diffusion, bool):
            raise InputError("Patient.intertissue_diffusion must be true or false; got "
                             f"{self.intertissue_diffusion!r}.")
        if self.vco2_ml_min is not None and self.vco2_ml_min > 1.5 * self.vo2:
            raise InputError(f"Patient.vco2_ml_min must be at most 1.5 × VO2 "
                             f"({1.5 * self.vo2:.0f} mL/min); got {self.vco2_ml_min:g}.")

    # ---- derived physiology --------------------------------------------------------------
    @property
    def bmi(self) -> float:
        """Body-mass index, kg/m²."""
        return self.weight_kg / (self.height_cm / 100.0) ** 2

    @property
    def fat_fraction(self) -> float:
        """Body fat as a fraction of weight (Deurenberg 1991 unless overridden)."""
        if self.body_fat_fraction is not None:
            return self.body_fat_fraction
        male = 1.0 if self.sex == "male" else 0.0
        if self.age_years >= 16.0:
            percent = 1.2 * self.bmi + 0.23 * self.age_years - 10.8 * male - 5.4
        else:
            percent = 1.51 * self.bmi - 0.70 * self.age_years - 3.6 * male + 1.4
        return min(max(percent / 100.0, 0.03), 0.7)

    @property
    def vo2(self) -> float:
        """Oxygen consumption under anaesthesia, mL/min STPD."""
        if self.vo2_ml_min is not None:
            return self.vo2_ml_min
        return _ANAESTHESIA_VO2_FACTOR * 10.0 * self.weight_kg ** 0.75

    @property
    def vco2(self) -> float:
        """CO2 production, mL/min STPD."""
        return self.vco2_ml_min if self.vco2_ml_min is not None else 0.8 * self.vo2

    @property
    def cardiac_output(self) -> float:
        """Cardiac output, L/min."""
        if self.cardiac_output_l_min is not None:
            return self.cardiac_output_l_min
        return 0.2 * self.weight_kg ** 0.75

    @property
    def dead_space(self) -> float:
        """Dead space, mL BTPS."""
        return self.dead_space_ml if self.dead_space_ml is not None else 2.2 * self.weight_kg

    @property
    def frc(self) -> float:
        """FRC under general anaesthesia, L BTPS."""
        if self.frc_l is not None:
            return self.frc_l
        if self.age_years >= 16.0 and self.height_cm >= 140.0:
            if self.sex == "male":
                awake = 0.0472 * self.height_cm + 0.009 * self.age_years - 5.29
            else:
                awake = 0.0360 * self.height_cm + 0.0031 * self.age_years - 3.182
        else:
            awake = 0.030 * self.weight_kg
        obesity = 1.0
        if self.bmi > 20.0:
            obesity = 2.718281828459045 ** (-0.0288 * (self.bmi - 20.0))
        return max(awake * 0.8 * obesity, 0.05)

    @property
    def alveolar_ventilation(self) -> float:
        """Alveolar ventilation for the PaCO2 target, L/min BTPS."""
        paco2_mmhg = self.paco2_target_kpa / KPA_PER_MMHG
        return 0.863 * self.vco2 / paco2_mmhg

    @property
    def default_rate_per_min(self) -> float:
        """Ventilator rate by age, breaths/min (common practice)."""
        if self.age_years < 2:
            return 28.0
        if self.age_years < 6:
            return 22.0
        if self.age_years < 13:
            return 18.0
        return 12.0

    @property
    def default_tidal_volume_ml(self) -> float:
        """Tidal volume giving the target alveolar ventilation at the default rate, mL BTPS."""
        return 1000.0 * self.alveolar_ventilation / self.default_rate_per_min + self.dead_space

    def tissues(self) -> tuple[TissueGroup, ...]:
        """Tissue compartments with volumes and blood flows (see ``RULES``)."""
        fat = self.fat_fraction * self.weight_kg
        lean = self.weight_kg - fat
        q_fat = min(_FAT_PERFUSION_L_MIN_KG * fat, 0.5 * self.cardiac_output)
        q_lean = self.cardiac_output - q_fat
        groups = [
            TissueGroup("vessel_rich", "Vessel-rich group (brain)", _LEAN_SHARE_VESSEL_RICH * lean,
                        _FLOW_RATIO_VESSEL_RICH * q_lean, "brain"),
            TissueGroup("muscle", "Muscle", _LEAN_SHARE_MUSCLE * lean,
                        (1.0 - _FLOW_RATIO_VESSEL_RICH) * q_lean, "muscle"),
        ]
        if self.intertissue_diffusion:
            groups.append(TissueGroup("fat", "Fat", 0.75 * fat, 0.75 * q_fat, "fat"))
            groups.append(TissueGroup("fat_next_to_muscle", "Fat next to muscle", 0.25 * fat,
                                      0.25 * q_fat, "fat"))
        else:
            groups.append(TissueGroup("fat", "Fat", fat, q_fat, "fat"))
        return tuple(groups)

    def intertissue_links(self) -> tuple[tuple[str, str, float], ...]:
        """Diffusion paths: (from tissue, to tissue, diffusion time constant in min)."""
        if not self.intertissue_diffusion:
            return ()
        return (("muscle", "fat_next_to_muscle", INTERTISSUE_TIME_CONSTANT_MIN),)

    def with_changes(self, **changes) -> Patient:
        """A copy with some fields changed (validated again)."""
        return replace(self, **changes)

    def describe(self) -> dict[str, float]:
        """The physiology this patient gives the model, with units in the keys."""
        return {
            "weight_kg": self.weight_kg,
            "bmi_kg_m2": self.bmi,
            "body_fat_fraction": self.fat_fraction,
            "vo2_ml_min": self.vo2,
            "vco2_ml_min": self.vco2,
            "cardiac_output_l_min": self.cardiac_output,
            "alveolar_ventilation_l_min": self.alveolar_ventilation,
            "frc_l": self.frc,
            "dead_space_ml": self.dead_space,
            "rate_per_min": self.default_rate_per_min,
            "tidal_volume_ml": self.default_tidal_volume_ml,
        }


#: Time for the fat next to muscle to fill by diffusion (slab of 2 mm, D ≈ 1e-5 cm²/s:
#: τ = 4 L² / (π² D) ≈ 27 min); circlesim's physical estimate, see docs/model.md.
INTERTISSUE_TIME_CONSTANT_MIN = 27.0

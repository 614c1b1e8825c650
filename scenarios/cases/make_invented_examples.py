"""Write the invented example case records in this folder (demo data, made by the model).

    .venv/bin/python scenarios/cases/make_invented_examples.py [--overwrite]

Every record here is INVENTED: circlesim's own model run for a made-up patient whose
physiology differs from the textbook defaults by stated factors, seen through a side-stream
monitor and given monitor noise. They show the record format and let `circlesim check`,
`fit` and `calibrate` be tried; they are not measurements of anyone.
"""

import sys
from dataclasses import replace
from pathlib import Path

import numpy as np

import circlesim as cs
from circlesim.cases.record import Monitor
from circlesim.cases.synthetic import synthetic_case, write_case
from circlesim.domain.physiology import Factors

HERE = Path(__file__).resolve().parent
SCENARIOS = HERE.parent
OVERWRITE = "--overwrite" in sys.argv


def _write(scenario, factors, name, title, interval, folder=HERE, seed=0, delay=8.0):
    scenario = replace(scenario, title=f"{title} (invented case record)",
                       question="How far is the textbook model from this invented record, "
                                "and what does a fit of its first minutes forecast?")
    record, _ = synthetic_case(scenario, factors, name=name, interval_min=interval,
                               monitor=Monitor(sampling_delay_s=delay), seed=seed)
    return write_case(record, folder, overwrite=OVERWRITE)


def main() -> None:
    demo = cs.load_scenario(SCENARIOS / "flow_reduction_sevoflurane.toml")
    n2o = cs.load_scenario(SCENARIOS / "carrier_nitrous_oxide_0_5.toml")
    print(_write(demo, Factors(cardiac_output=1.25, vo2=0.85, frc=0.9, leak_ml_min=40.0),
                 "invented_sevoflurane_minimal_flow", "Sevoflurane at 0.5 L/min, elderly",
                 interval=10.0 / 60.0, seed=1))
    print(_write(n2o, Factors(cardiac_output=0.9, solubility=1.1, leak_ml_min=15.0),
                 "invented_isoflurane_nitrous_oxide", "Isoflurane with N2O at 0.5 L/min",
                 interval=1.0, seed=2))
    # A small invented cohort for `circlesim calibrate`: one department's patients whose
    # cardiac output runs high and O2 consumption low against the textbook rules.
    cohort = HERE / "invented_cohort"
    cohort.mkdir(exist_ok=True)
    rng = np.random.default_rng(2026)
    for k in range(6):
        patient = cs.Patient(weight_kg=round(float(rng.uniform(55, 100)), 1),
                             height_cm=round(float(rng.uniform(155, 190))),
                             age_years=round(float(rng.uniform(25, 80))),
                             sex=("female", "male")[k % 2])
        factors = Factors(cardiac_output=round(float(1.2 * np.exp(rng.normal(0, 0.1))), 3),
                          vo2=round(float(0.85 * np.exp(rng.normal(0, 0.08))), 3),
                          leak_ml_min=round(float(np.exp(rng.normal(np.log(20), 0.8))), 1))
        print(_write(replace(demo, patient=patient), factors, f"invented_patient_{k + 1}",
                     f"Invented cohort patient {k + 1}", interval=1.0, folder=cohort,
                     seed=100 + k))


if __name__ == "__main__":
    main()

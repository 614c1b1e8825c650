"""circlesim: gas kinetics in a circle breathing system at low fresh gas flow.

A planning and teaching aid, not a medical device. Predictions come from a population model;
always monitor inspired and end-tidal oxygen and agent with a calibrated analyser; local
policy, the agent's product labelling and the responsible clinician decide.

The main entry point is :func:`simulate`::

    from circlesim import Patient, Circuit, Plan, Step, Vaporizer, simulate
    plan = Plan([Step(0, o2_l_min=2, air_l_min=4, dial_percent=6),
                 Step(8, o2_l_min=0.3, air_l_min=0.2, dial_percent=3)], duration_min=120)
    result = simulate(Patient(weight_kg=80, age_years=80), Circuit(), plan,
                      vaporizer=Vaporizer("sevoflurane"))
    result.frame()
"""

from circlesim.base.cautions import CAUTION
from circlesim.base.validation import InputError
from circlesim.domain.equipment import Absorber, Circuit, Vaporizer
from circlesim.domain.patient import Patient
from circlesim.domain.plan import Plan, Step
from circlesim.engine.alerts import AlertRule, default_rules
from circlesim.engine.result import Alert, Result
from circlesim.engine.simulate import SimulationError
from circlesim.properties import agent, agent_names
from circlesim.scenario import Scenario, load_scenario
from circlesim.targets.predict import simulate

__version__ = "0.1.0"

__all__ = [
    "CAUTION",
    "Absorber",
    "Alert",
    "AlertRule",
    "Circuit",
    "InputError",
    "Patient",
    "Plan",
    "Result",
    "Scenario",
    "SimulationError",
    "Step",
    "Vaporizer",
    "agent",
    "agent_names",
    "default_rules",
    "load_scenario",
    "simulate",
]

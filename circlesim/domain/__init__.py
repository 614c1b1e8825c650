"""Domain objects: the patient, the breathing system (circuit, absorber, vaporizer), the plan
and user prices — frozen dataclasses validated at construction. Imports properties and base.
"""

"""Measured cases: case records, predictive performance, fitting the patient, cohort profiles.

``record`` reads a case record (scenario TOML + measurements CSV); ``check`` scores the
model against it (``performance``: Varvel's measures); ``fit`` estimates the patient from it
and ``forecast`` predicts the rest of the case with a band; ``cohort`` calibrates a cohort
profile over many records; ``synthetic`` makes records from the model for tests and demos.
"""

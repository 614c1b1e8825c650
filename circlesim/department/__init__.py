"""Department review of recorded cases under a local flow rule (``docs/department-review.md``).

:mod:`~circlesim.department.rule` reads a department's flow rule from TOML;
:mod:`~circlesim.department.course` turns a record's measured end-tidal course and a rule into
plans for the target controller; :mod:`~circlesim.department.counterfactual` predicts one case
under the rule with the patient fitted from its record; :mod:`~circlesim.department.review`
runs a folder of records and adds up the totals; :mod:`~circlesim.department.invented` makes an
invented month of records for demonstrations.
"""

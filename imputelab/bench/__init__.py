"""Bench stage: imputelab against reference imputers on open datasets.

Takes the datasets described in ``datasets_meta/`` (loaded offline from installed packages)
and the generated demo trip log (``demo_data``), and gives, per dataset and mask, the scores
of imputelab's methods, of its chosen plan and of scikit-learn's imputers on the same hidden
cells (``runner``).
"""

"""Score stage: the experiment and the plan it writes.

Takes a table and its survey, hides known cells under each mask, fills them with every
candidate method, scores the fills against the hidden truth, optionally checks each fill by
cross-validated models of a target column, and gives a :class:`~imputelab.score.plan.Plan`:
per column, the chosen method with its evidence, as versioned JSON a person can edit.
"""

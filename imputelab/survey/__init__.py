"""Survey stage: what each column is and what its blanks mean.

Takes a :class:`~imputelab.io.tables.Table` and gives a survey: each column's kind and
cleaning (tokens and codes read as missing, decimals, date format), missing counts, drop
flags, and, with the checks on, the evidence about the blanks (Little's MCAR test, missing
patterns, how well other columns predict a column's blanks, structural rules).
"""

"""Fill stage: takes a plan (made by the score stage) and a table, and gives the table with
every planned hole filled, every observed cell, the column order and the dtypes unchanged,
plus a report of what was filled; in memory (``frame``), later from a saved fitted model
that loads without executing code (``saved``, ``model_fill``), chunk by chunk for files
larger than memory (``streamed``), in Dask partitions (``partitioned``), as M completed
tables for multiple imputation pooled by Rubin's rules (``multiple``, ``pooling``), or inside
a scikit-learn pipeline (``transformer``).
"""

"""Fill stage: apply a plan to a file, now or later.

Takes a plan and a table, and gives the filled table: in memory (``frame``), from a saved
fitted model that loads without executing code (``saved``), streamed chunk by chunk for
files larger than memory (``streamed``), in Dask partitions (``partitioned``), as M
completed tables for multiple imputation with Rubin's rules to pool them (``multiple``,
``pooling``), or inside a scikit-learn pipeline (``transformer``).
"""

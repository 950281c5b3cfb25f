"""Files in and out: the only code that opens a table file.

Takes a path (CSV or Parquet) and gives a :class:`~imputelab.io.tables.Table` of text cells
(CSV) or typed columns (Parquet), with the file's fingerprint; writes tables and folders
atomically (a temporary file beside the target, renamed on success). ``columns`` holds the
one definition of a blank and of the text tokens read as missing, and the cleaning that
turns a column's text into typed values under a :class:`~imputelab.io.columns.ColumnSpec`.
"""

"""The working frame: what masks and methods see.

Takes a cleaned, typed table and the plan's choice of columns, and gives a frame of
``float64`` columns (datetimes as seconds) and unordered categoricals, with the mapping back
to the table's own types (:class:`~imputelab.frame.encoding.Encoding`); ``setup`` decides
which columns are filled and which only help fill the others.
"""

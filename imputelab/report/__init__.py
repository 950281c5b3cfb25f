"""Report stage: a self-contained HTML page of a plan on its file.

Takes a table and the plan made from it (with, optionally, the survey behind the plan), reads
and fills the table in memory as ``fill`` would, and gives one HTML page (``page``) of six
sections (``overview``, ``experiment``, ``filling``, ``diagnostics``) drawn from the plan's
stored scores and survey checks (``facts``; the file is surveyed again only for an older plan
or other survey options), with charts as inline SVG (``charts``, ``chart_style``), an inline
style sheet (``style``), no script and nothing fetched: the same file and plan give the same
bytes.
"""

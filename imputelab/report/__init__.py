"""Report stage: a self-contained HTML page of a plan on its file.

Takes a plan, its file and the stored survey and experiment, and gives one HTML file with
the charts drawn as inline SVG (``charts``), no script and nothing fetched.
"""

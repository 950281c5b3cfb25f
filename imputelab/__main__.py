"""``python -m imputelab``."""

from imputelab.cli import main

main()

"""Bench stage: imputelab against scikit-learn's imputers on open datasets, and the demo data.

Takes the datasets described in ``datasets_meta/`` (loaded offline from installed packages,
``datasets``) and :class:`~imputelab.bench.options.BenchOptions` (masks, rate, draws, seed); for
every dataset it hides cells in its complete rows, fills them with every imputelab method, with
a plan that ``score`` chose for each draw on a table where that draw's cells were already blank
(``selection``), and with scikit-learn's imputers (``references``), all through one executor
(``runner``), and gives per dataset and mask the NRMSE and PFC of each with their standard
errors and their ratio to the best reference, as plain data and as ``results.json``,
``results.md`` and ``ratios.svg`` (``writing``). It also gives the generated demo trip log
(``demo_data``).
"""

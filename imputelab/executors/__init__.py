"""Where a grid of independent tasks runs.

Takes a function, what every task shares and a list of task arguments, and gives the
results in task order, whether the tasks ran in this process, in joblib worker processes or
on a Dask cluster. Every grid of the engine (the experiment, the survey's checks, the target
check, the bench) runs through one of these executors.
"""

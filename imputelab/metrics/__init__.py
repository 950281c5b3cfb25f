"""How close a fill is to the hidden truth.

Takes hidden values and their fills, and gives accuracy scores (RMSE, NRMSE, MAE, PFC,
macro F1 ...) and distribution checks (Wasserstein distance, variance ratio, correlation
shift, total variation), with their registry of names, directions and kinds.
"""

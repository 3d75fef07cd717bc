"""Rules written once over (compounds, points, mask) arrays and read by both solvers.

The lmfit path (one compound: a batch of one) and the batched engine call the same
functions here, so a rule cannot drift between them.
"""

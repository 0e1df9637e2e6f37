"""The training engine: losses, the optimizer rules in NumPy (the readable specification) and
the one registry that declares every optimizer, step-size schedules, the compiled numba
kernels and their Python side (named argument structures, state, threads), the trainer
(epochs, early stopping, plateau decay, divergence guard), full-batch L-BFGS, and a NumPy
reference epoch that the kernels are tested against. It takes CSR matrices and label
indices; it knows nothing of text, models, reports or the command line. Importing this
package is cheap: numba loads only with :mod:`lintext.engine.kernels`.
"""

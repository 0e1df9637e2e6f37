"""Finding a learning rate: step-size sweeps over a grid of optimizers and learning rates, run in
parallel worker processes over a matrix saved once, and the learning-rate probe (Smith's range
test). Built on the pipeline and the engine; writes its pages through :mod:`lintext.report`.
"""

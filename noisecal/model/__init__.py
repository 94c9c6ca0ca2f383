"""A filter's own model: the model file, Van Loan discretisation, Jacobians.

``spec.read_model`` reads and checks a model file (noise values resolved from
noisecal blocks); ``discretize`` gives Phi and Q with intervals; ``jacobian``
linearises a nonlinear (Python) model.
"""

"""Step 3, model: the system's specification, priors, the parameter layout and the
vectorised log-posterior (:class:`OrbitModel`).
"""

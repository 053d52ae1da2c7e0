"""Step 2, orbits: Kepler's equation and the orbit evaluators (two-body and perturbed
dynamics); numpy arrays in, arrays out, no I/O.
"""

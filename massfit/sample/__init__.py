"""Step 5, sample: emcee until converged, the sampler's change of coordinates, and the
checkpoint that makes a run resumable.
"""

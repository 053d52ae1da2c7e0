"""Step 5, sample: emcee until converged, the sampler's change of coordinates, and the
checkpoint that makes a run resumable.
"""

#: The samplers a fit can use: emcee's ensemble, or nested sampling (dynesty).
ENGINES = ("emcee", "nested")

"""Step 4, start: period search, linear scans and least squares that give the sampler its
starting points and the candidate modes.
"""

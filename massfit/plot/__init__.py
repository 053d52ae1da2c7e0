"""Step 7a, plot: the figures, each a function that returns a matplotlib Figure.
"""

"""Step 8, result: :class:`FitResult`, the one object a fit returns (numbers, figures,
files), and :func:`load_result` that reads a saved folder back.
"""

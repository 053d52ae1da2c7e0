"""Step 6, summarise: derived quantities and their intervals, fit quality, residual
checks and posterior checks (modes, prior sensitivity, adequacy).
"""

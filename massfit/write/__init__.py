"""Step 7b, write: parameter tables (LaTeX, Markdown, HTML, ECSV) and the run record.
"""

"""Step 1, read: CSV/ECSV tables into validated :class:`Observations` in internal units;
every bad row named by file, line and column.
"""

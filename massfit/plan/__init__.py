"""The observation planner: which epochs shrink the central mass's uncertainty most."""

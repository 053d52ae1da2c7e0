"""Invented example systems and the simulator that makes their data.
"""

"""Derived products computed from QC'd datasets (tide events, datums, fitted constants, exposure).

A stage: it computes from the science packages and hands the results to the archive's
writers; the archive itself only stores them.
"""

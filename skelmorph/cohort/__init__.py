"""Cohorts: many samples in groups, analysed in batch and compared."""

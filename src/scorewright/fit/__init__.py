"""Fitting and validating a model from a data file (`scorewright fit`)."""

from .run import CAUTIONS, FitOptions, FitResult, fit_file, fit_table

__all__ = ["CAUTIONS", "FitOptions", "FitResult", "fit_file", "fit_table"]

"""validate: uncertainty budgets and method-validation reports for photometric methods."""

__version__ = "0.1.0"

"""lintext: sparse-feature linear text classifiers, trained and explained."""

__version__ = "0.1.0"

"""dyadcast: monthly forecasts of arrivals per origin-destination pair, with an accuracy log."""

__version__ = "0.1.0"

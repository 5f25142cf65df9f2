"""Prefect flows: they only compose the plain functions of `dyadcast` into scheduled, observable runs."""

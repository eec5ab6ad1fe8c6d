"""Exports of a validated schedule: tables (JSON, CSV, C), their check, the estimator FMU."""

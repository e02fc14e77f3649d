"""armlock audit: logs -> sufficient statistics (engine) -> statistics -> verdicts -> reports."""

"""Reports: PNG plots and the self-contained HTML report."""

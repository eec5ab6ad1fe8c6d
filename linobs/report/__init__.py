"""Console tables, figures and the HTML report."""

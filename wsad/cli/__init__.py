"""Console entry points (thin: parse, call the package, print)."""

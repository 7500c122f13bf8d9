"""Statistics from sums: metrics, intervals, slice-versus-rest tests, multiple-testing
correction, ranking, group fairness, and ``summarize`` (tally in, result out)."""

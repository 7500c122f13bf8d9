"""The core: read a table, validate its outcome columns, encode its attributes with an encoding
fitted once, and tally confusion cells and loss sums per slice. Nothing here computes a
statistic beyond sums, and nothing here imports an interface."""

"""What every stage uses and nothing in it depends on a stage: errors, file writes, table contracts, ordered sums.

- ``errors``: the errors a user reads (a config, an input, a market), each
  naming the file, the column, the row and the value where it can;
- ``io``: atomic writes of Parquet and text, input globs, checksums;
- ``contracts``: our column names and types per table, and the check that a
  frame has them;
- ``stable``: sums and means added in a fixed order, so reruns give the
  same digits.

Nothing here imports a module of ``liqpanel`` outside ``liqpanel.core``.
"""

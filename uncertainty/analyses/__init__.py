"""The analyses: each folder owns its computation, result, figure, table and report section."""

"""Application layer: run pipeline, bundle, report, command line, docs generation."""

"""Foundation: errors, units, TOML reading, serialisation, provenance, resources, the executor."""

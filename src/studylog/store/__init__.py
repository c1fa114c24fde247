"""The store: models, sessions and migrations. Knows nothing of the layers above it."""

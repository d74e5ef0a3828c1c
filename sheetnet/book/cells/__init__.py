"""The cells of each sheet as data (see book.plan for the registry that lists them)."""

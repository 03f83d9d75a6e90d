"""The invented demo facility and the `load_demo` command that loads it."""

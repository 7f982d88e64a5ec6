"""What a sweep is asked to do: the spec file's sections, its search space, their checks."""

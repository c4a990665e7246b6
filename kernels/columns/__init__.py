"""Column tridiagonal solves (Thomas algorithm) over every (variable, column)."""

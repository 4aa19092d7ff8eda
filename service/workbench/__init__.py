"""Tools for the people who own the rules: expected-outcome fixtures, and running them."""

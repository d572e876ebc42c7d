"""Example problem files bundled with cubage (data only)."""

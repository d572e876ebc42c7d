"""What a value read from TOML is, in words for one-line error messages (shared by the problem-file readers)."""

__all__ = ["is_number", "type_name"]


def is_number(v) -> bool:
    """Whether ``v`` is an int or a float (TOML booleans are not numbers)."""
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def type_name(v) -> str:
    """``v``'s TOML kind with its article: "a boolean", "an integer", "a number", "a string", "a list", "a table"."""
    if isinstance(v, bool):
        return "a boolean"
    if isinstance(v, int):
        return "an integer"
    if isinstance(v, float):
        return "a number"
    if isinstance(v, str):
        return "a string"
    if isinstance(v, list):
        return "a list"
    if isinstance(v, dict):
        return "a table"
    return f"a {type(v).__name__}"

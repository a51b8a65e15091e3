"""Tables and figures from study results."""

"""The noiselab command line (typer). Imports of heavy layers happen inside commands."""

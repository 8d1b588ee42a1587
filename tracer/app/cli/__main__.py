"""``python -m tracer.app.cli``: the tracer command."""

from tracer.app.cli.group import main

main()

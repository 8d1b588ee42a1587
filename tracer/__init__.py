"""corpus-tracer: trace associations in word embeddings back to the corpus that made them."""

__version__ = "0.1.0"

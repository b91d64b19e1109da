"""The SQL adapter layer: Arrow batches from DuckDB in, kernel calls, Arrow out.

``catalog`` describes every public SQL function once; ``registry`` registers
them. ``arrow_io`` converts and checks input, ``readers`` reads outcomes; the
``*_udfs`` modules hold the function bodies. Nothing here imports the CLI.
"""

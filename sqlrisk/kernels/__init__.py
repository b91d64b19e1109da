"""Pure numerical kernels: numpy arrays in, numpy arrays out.

Nothing here imports DuckDB, Arrow or the CLI. The SQL adapters in
``sqlrisk.functions`` convert Arrow batches to the flat arrays these kernels
take (values of every group back to back, plus ``offsets`` so that group ``g``
is ``values[offsets[g]:offsets[g+1]]``).
"""

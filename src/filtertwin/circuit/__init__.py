"""The circuit: design files, prototypes, standard parts, Sallen-Key stages,
the as-built analog model and its noise.
"""

"""Pure signal computation for swingmeter.

Arrays and numbers in, numbers and small frozen dataclasses out. No files, threads,
printing, Qt or sound-card access live here. Units are in parameter and field names.
"""

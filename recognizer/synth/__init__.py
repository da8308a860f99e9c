"""Made-up handwriting and forms with known truth, for demos, tests and benchmarks only.

Nothing in the rest of ``recognizer`` imports this package (a layer contract checks it).
"""

"""Reading and validating inputs: the scenario file, case/counts tables, the cell table.

Stage 1 of the one-way flow (inputs -> estimation -> decision -> assessment -> running ->
presentation). Everything the user gives is validated here, once, with messages that name the
file, key or column, the bad value and what was expected; later stages trust these objects.

May import: numpy, pandas, pyarrow and the shared modules ``policy.errors``,
``policy.outputs`` and ``policy.cautions``. Nothing from a later stage (checked by the
layers contract in ``tests/test_architecture.py``).
"""

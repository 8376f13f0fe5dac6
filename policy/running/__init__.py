"""Running the stages end to end: one scenario (the pipeline), a folder of them (batch),
and where tasks run (in this process, worker processes or a Dask cluster).

Stage 5: the library functions the CLI verbs wrap. May import every earlier stage and the
demo (which it wires in as a data source), never ``policy.presentation``.
"""

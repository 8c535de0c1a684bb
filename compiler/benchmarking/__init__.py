"""Randomized benchmarking of a device's native steps: the Clifford groups
(:mod:`.group`), their decomposition into native steps (:mod:`.native`),
random sequences written as ordinary ``.dotseq`` files (:mod:`.sequences`),
the decay fit and interleaved RB (:mod:`.fit`), exact small-matrix survival
for checks (:mod:`.exact`), and the ``dotseq rb`` command's work
(:mod:`.run`).  Not a stage of the pipeline: a client of it (the sequences
go through ``compiler.load`` and the simulator like any other file)."""

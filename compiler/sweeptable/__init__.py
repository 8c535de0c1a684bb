"""One sweep table for in-file sweeps (the report of a sequence with its own
``sweep``) and ``--vary`` sweeps (``dotseq sweep``): the table type
(:mod:`.types`), its files ``sweep.csv`` and ``sweep.json`` (:mod:`.write`),
its figures ``sweep.png`` and ``observables.png`` (:mod:`.figure`), and the
table of a simulation's runs (:mod:`.build`).  See docs/sweep.md and
docs/report.md."""

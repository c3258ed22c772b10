"""The command's exit codes, once for every command: a pipeline tells findings from failures.

0 done; 1 internal fault (a bug); 2 usage error, unreadable input, an output that cannot be
written (a full disk, a reader that closed early) or invalid rule set; 3 findings: a sample
reached the `--fail-at` grade (or `compare` saw a move, replay a difference, or a ledger import
rejected rows whose sample id was recorded with other values). 2 outranks 3 (the run is
incomplete); `grade --summary` then still lists the findings.
"""

OK, INTERNAL, USAGE, FINDINGS = 0, 1, 2, 3

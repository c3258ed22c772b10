"""The command's exit codes, once for every command: a pipeline tells findings from failures.

0 done; 1 internal fault (a bug); 2 usage error, unreadable input or invalid rule set;
3 findings: a sample reached the `--fail-at` grade (or `compare` saw a move, replay a
difference, or a ledger import rejected rows whose sample id was recorded with other values).
"""

OK, INTERNAL, USAGE, FINDINGS = 0, 1, 2, 3

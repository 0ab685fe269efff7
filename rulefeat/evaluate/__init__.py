"""Student-grouped evaluation of the rules' added value: splits, variants, statistics and reports."""

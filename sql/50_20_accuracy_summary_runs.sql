-- Layer 50 (accuracy summaries). accuracy_summary_runs: accuracy_summary_runs_of over accuracy_groups, i.e.
-- every run with scored rows and whether it is the latest, the reference and a skill run.
CREATE OR REPLACE VIEW accuracy_summary_runs AS
SELECT * FROM accuracy_summary_runs_of('accuracy_groups');

-- The movement path asks, for every batch, how far back a done count pass can reach
-- (the widest clock uncertainty of the site's done passes). This index answers it from
-- its last entry instead of a walk over every pass.
create index count_pass_uncertainty on count_pass(site_id, uncertainty_ms) where done_at is not null;

-- Placing a recount reads, per run of the day's list, how many tasks are still open and
-- where the recounts at the head of the run end; both are answered from an index
-- whatever the size of the list.
create index count_task_open on count_task(list_id, run) where status <> 'done';
create index count_task_recount_seq on count_task(list_id, run, seq) where recount_of is not null;

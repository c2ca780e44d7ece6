-- The movement path asks, for every batch, how far back a done count pass can reach
-- (the widest clock uncertainty of the site's done passes). This index answers it from
-- its last entry instead of a walk over every pass.
create index count_pass_uncertainty on count_pass(site_id, uncertainty_ms) where done_at is not null;

-- Placing a recount reads, per run of the day's list, how many tasks are still open and
-- where the recounts at the head of the run end; both are answered from an index
-- whatever the size of the list.
create index count_task_open on count_task(list_id, run) where status <> 'done';
create index count_task_recount_seq on count_task(list_id, run, seq) where recount_of is not null;

-- Automatic count adjustments: a site that allows it has each settled, current hit with a
-- small non-zero variance posted without a review (DESIGN §5). One row per result and one
-- per movement, so a second settling pass posts nothing new; the review's own table needs
-- a person and a decision, which an automatic posting has not.
create table count_auto_adjustment (
    id           integer primary key,
    result_id    integer not null unique references count_result(id),
    movement_id  integer not null unique references movement(id),
    posted_at    integer not null
) strict;

-- When the site last switched automatic adjustment on: only counts that reach the server
-- from then on are adjusted, so switching it on never posts a backlog of old counts.
alter table netting_settings add column auto_adjust_from integer;
update netting_settings set auto_adjust_from = cast(strftime('%s', 'now') as integer) * 1000
    where auto_adjust = 1;
-- The settling pass looks for current hits with a variance at sites that adjust them.
create index count_result_auto on count_result(site_id, id)
    where superseded_by is null and verdict = 'hit' and variance <> 0;

-- 0005: netting counts against the ledger (DESIGN.md §4, §5): per-site tolerance
-- and review policy, each movement source's timing, the results of netting with
-- their evidence, and the manager's review of each difference.

-- Tolerance per class: a null limit is not set (all set limits must hold; none set
-- means exact). Percent is in basis points of f*, value in minor units.
create table netting_settings (
    site_id              integer primary key references site(id),
    tol_a_units          integer check (tol_a_units >= 0),
    tol_a_bp             integer check (tol_a_bp >= 0),
    tol_a_value_minor    integer check (tol_a_value_minor >= 0),
    tol_b_units          integer check (tol_b_units >= 0),
    tol_b_bp             integer check (tol_b_bp >= 0),
    tol_b_value_minor    integer check (tol_b_value_minor >= 0),
    tol_c_units          integer check (tol_c_units >= 0),
    tol_c_bp             integer check (tol_c_bp >= 0),
    tol_c_value_minor    integer check (tol_c_value_minor >= 0),
    -- Post small within-tolerance variances without a review.
    auto_adjust          integer not null check (auto_adjust in (0, 1)),
    -- Above this absolute adjustment value only an inventory manager may approve.
    manager_value_minor  integer not null check (manager_value_minor >= 0),
    -- Bulk approval is offered only below this absolute value.
    bulk_value_minor     integer not null check (bulk_value_minor >= 0)
) strict;

-- How each movement source's times behave: the uncertainty of its event times and
-- how late it may post.
create table source_timing (
    site_id         integer not null references site(id),
    source          text not null,
    uncertainty_ms  integer not null check (uncertainty_ms >= 0),
    posting_lag_ms  integer not null check (posting_lag_ms >= 0),
    primary key (site_id, source)
) strict, without rowid;

-- Reason codes a reviewer picks from.
create table reason_code (
    site_id  integer not null references site(id),
    code     text not null,
    label    text not null,
    primary key (site_id, code)
) strict, without rowid;

-- One (bin, item, lot) key of a count pass, netted. A re-net writes a new row and
-- marks the old one superseded, so the history of a result is kept.
create table count_result (
    id               integer primary key,
    pass_id          integer not null references count_pass(id),
    site_id          integer not null references site(id),
    bin_id           integer not null references bin(id),
    item_id          integer not null references item(id),
    lot              text not null default '',
    class            text check (class in ('A', 'B', 'C')),
    counted          integer not null,
    f_star           integer not null,
    variance         integer not null,
    -- The netting status (no moves in window, matches a state, ...).
    status           text not null,
    -- hit | out_of_tolerance; 'recount' results wait for their recount.
    verdict          text not null,
    unit_cost_minor  integer not null,
    -- When the key was counted (its last scan, or the bin done), server time.
    counted_at       integer not null,
    window_start     integer not null,
    window_end       integer not null,
    -- Feasible states, moves in the window and the opening balance, as JSON.
    evidence         text not null,
    -- The ledger's recorded-order high-water mark the result was computed from.
    watermark        integer not null,
    settles_at       integer not null,
    settled          integer not null default 0 check (settled in (0, 1)),
    superseded_by    integer references count_result(id),
    -- Why this row replaced an earlier one (a late movement, a recount), if it did.
    renet_reason     text not null default '',
    computed_at      integer not null
) strict;
create index count_result_pass on count_result(pass_id);
create index count_result_key on count_result(bin_id, item_id, lot, counted_at);
create index count_result_site on count_result(site_id, counted_at);
create index count_result_open on count_result(site_id, verdict) where superseded_by is null;

-- The decision on an out-of-tolerance result. An approval posts exactly one
-- count-adjustment movement, recorded here.
create table count_review (
    id           integer primary key,
    result_id    integer not null unique references count_result(id),
    decision     text not null check (decision in ('approved', 'rejected')),
    reason_code  text not null,
    note         text not null default '',
    decided_by   integer not null references user_account(id),
    decided_at   integer not null,
    movement_id  integer unique references movement(id)
) strict;

-- A recount task names the result it re-checks.
alter table count_task add column recount_of integer references count_result(id);

-- The netting service's own columns. A recount's verdict on the first result:
-- confirmed (waits for review), book_right (the first count was wrong: a hit) or
-- supervisor_count (neither: a supervisor counts the bin).
alter table count_result add column recount_outcome text
    check (recount_outcome in ('confirmed', 'book_right', 'supervisor_count'));
-- Logged against the count, not the record: a recount found the book right.
alter table count_result add column first_count_wrong integer not null default 0
    check (first_count_wrong in (0, 1));
create index count_result_current on count_result(pass_id, item_id, lot) where superseded_by is null;
create index count_result_settling on count_result(settles_at) where settled = 0 and superseded_by is null;
-- Late movements find the passes they may change by bin and done time.
create index count_pass_done on count_pass(bin_id, done_at) where done_at is not null;

-- A recount is a second task for a bin already on the day's list, so the list's
-- one-task-per-bin rule holds only for tasks that re-check no result. SQLite cannot
-- drop a table constraint, so the table is rebuilt with the same columns and rows;
-- references to it are checked at commit (count_pass.task_id points at the same ids).
pragma defer_foreign_keys = on;
create table count_task_rebuilt (
    id          integer primary key,
    list_id     integer not null references count_list(id),
    bin_id      integer not null references bin(id),
    seq         integer not null,
    run         integer not null,
    reason      text not null check (reason in ('recount', 'negative_balance', 'short_pick',
                                                'zero_balance', 'due', 'dead_stock')),
    class       text check (class in ('A', 'B', 'C')),
    detail      text not null,
    lines       integer not null,
    est_s       integer not null,
    status      text not null default 'open' check (status in ('open', 'started', 'done')),
    done_at     integer,
    recount_of  integer references count_result(id)
) strict;
insert into count_task_rebuilt (id, list_id, bin_id, seq, run, reason, class, detail, lines,
                                est_s, status, done_at, recount_of)
    select id, list_id, bin_id, seq, run, reason, class, detail, lines, est_s, status, done_at,
           recount_of
    from count_task;
drop table count_task;
alter table count_task_rebuilt rename to count_task;
create index count_task_list on count_task(list_id, run, seq);
create unique index count_task_bin on count_task(list_id, bin_id) where recount_of is null;
create index count_task_recount on count_task(recount_of) where recount_of is not null;

-- 0003: the day's count list: planning settings, the site calendar, ABC runs
-- and class history, short-pick reports from the host, when each bin was last
-- counted, and the count lists with their bin tasks.
-- Days are ISO dates (YYYY-MM-DD) in the site's calendar; instants are ms.

create table planning_settings (
    site_id            integer primary key references site(id),
    abc_basis          text not null check (abc_basis in ('value', 'hits')),
    abc_a_pct          integer not null check (abc_a_pct between 1 and 100),
    abc_b_pct          integer not null check (abc_b_pct between abc_a_pct and 100),
    abc_window_days    integer not null check (abc_window_days > 0),
    per_year_a         integer not null check (per_year_a > 0),
    per_year_b         integer not null check (per_year_b > 0),
    per_year_c         integer not null check (per_year_c > 0),
    per_year_dead      integer not null check (per_year_dead > 0),
    task_base_s        integer not null check (task_base_s >= 0),
    task_line_s        integer not null check (task_line_s >= 0),
    zero_demand_days   integer not null check (zero_demand_days >= 0),
    level_slack_pct    integer not null check (level_slack_pct between 0 and 100)
) strict;

-- Worked weekdays as a bit mask, Monday = 1, Sunday = 64.
create table site_calendar (
    site_id        integer primary key references site(id),
    weekday_mask   integer not null check (weekday_mask between 0 and 127)
) strict;

create table site_holiday (
    site_id  integer not null references site(id),
    day      text not null,
    primary key (site_id, day)
) strict, without rowid;

-- One classification of a site, with the rule it used and the ledger watermark.
create table abc_run (
    id           integer primary key,
    site_id      integer not null references site(id),
    day          text not null,
    basis        text not null,
    a_pct        integer not null,
    b_pct        integer not null,
    window_days  integer not null,
    items        integer not null,
    changed      integer not null,
    watermark    integer not null,
    ran_at       integer not null
) strict;
create index abc_run_site on abc_run(site_id, id);

-- An item's class from `since` until its next row: a row is written only
-- when the class changes, so the history says when an item moved.
create table item_class (
    item_id   integer not null references item(id),
    run_id    integer not null references abc_run(id),
    class     text not null check (class in ('A', 'B', 'C')),
    since     text not null,
    primary key (item_id, run_id)
) strict, without rowid;

-- The host's report that a pick found less than the book said.
create table short_pick (
    id           integer primary key,
    uid          text not null unique,
    site_id      integer not null references site(id),
    bin_id       integer not null references bin(id),
    item_id      integer not null references item(id),
    lot          text not null default '',
    short_qty    integer not null check (short_qty >= 0),
    reported_at  integer not null,
    recorded_at  integer not null,
    source       text not null,
    doc_ref      text not null default ''
) strict;
create index short_pick_bin on short_pick(bin_id, reported_at);

-- When each bin was last counted whole.
create table bin_count (
    bin_id      integer primary key references bin(id),
    counted_on  text not null,
    counted_at  integer not null
) strict;

create table count_list (
    id         integer primary key,
    site_id    integer not null references site(id),
    day        text not null,
    counters   integer not null check (counters > 0),
    minutes    integer not null check (minutes > 0),
    level_s    integer not null,
    warnings   text not null,
    built_at   integer not null,
    watermark  integer not null,
    -- Raised by every change, so a phone can tell its copy is stale.
    version    integer not null default 1,
    unique (site_id, day)
) strict;

-- Who holds each run of a list; a counter holds at most one run a day.
create table count_run (
    list_id  integer not null references count_list(id),
    run      integer not null check (run > 0),
    holder   text not null default '',
    primary key (list_id, run)
) strict, without rowid;
create unique index count_run_holder on count_run(list_id, holder) where holder <> '';

create table count_task (
    id        integer primary key,
    list_id   integer not null references count_list(id),
    bin_id    integer not null references bin(id),
    seq       integer not null,
    run       integer not null,
    reason    text not null check (reason in ('recount', 'negative_balance', 'short_pick',
                                              'zero_balance', 'due', 'dead_stock')),
    class     text check (class in ('A', 'B', 'C')),
    detail    text not null,
    lines     integer not null,
    est_s     integer not null,
    status    text not null default 'open' check (status in ('open', 'started', 'done')),
    done_at   integer,
    unique (list_id, bin_id)
) strict;
create index count_task_list on count_task(list_id, run, seq);

-- 0006: accuracy targets and the planner's buffer inputs (DESIGN.md §8): the
-- site's accuracy target, demand window and service level per class, and the
-- lead time, its spread and review period the planner supplies per item or per
-- item group. Days are the site's working days, the unit demand is measured in.

create table accuracy_settings (
    site_id             integer primary key references site(id),
    -- The IRA the site aims for, in basis points (9500 = 95 %).
    ira_target_bp       integer not null check (ira_target_bp between 0 and 10000),
    -- Calendar days of issues the daily demand is measured over.
    demand_window_days  integer not null check (demand_window_days between 1 and 3660),
    service_level_a     real not null check (service_level_a > 0 and service_level_a < 1),
    service_level_b     real not null check (service_level_b > 0 and service_level_b < 1),
    service_level_c     real not null check (service_level_c > 0 and service_level_c < 1)
) strict;

-- One item's planner inputs; a null service level takes the class's.
create table planner_input (
    item_id            integer primary key references item(id),
    site_id            integer not null references site(id),
    lead_time_days     real not null check (lead_time_days >= 0),
    lead_time_sd_days  real not null check (lead_time_sd_days >= 0),
    review_days        real not null check (review_days >= 0),
    service_level      real check (service_level > 0 and service_level < 1),
    updated_at         integer not null,
    updated_by         text not null
) strict;
create index planner_input_site on planner_input(site_id);

-- Defaults for the items of one item group that have no row of their own.
create table planner_group_default (
    site_id            integer not null references site(id),
    item_group         text not null,
    lead_time_days     real not null check (lead_time_days >= 0),
    lead_time_sd_days  real not null check (lead_time_sd_days >= 0),
    review_days        real not null check (review_days >= 0),
    service_level      real check (service_level > 0 and service_level < 1),
    updated_at         integer not null,
    updated_by         text not null,
    primary key (site_id, item_group)
) strict, without rowid;

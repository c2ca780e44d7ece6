-- 0011: how each site sets its count intervals, and why each task is on its list.
-- `abc` counts each class so many times a year (the behaviour before this migration,
-- and what every site starts with); `risk` sets each item's interval by the value of
-- record error it is expected to leave standing; `blend` does that but counts each class
-- at least `floor_*` times a year (0: no floor for that class).
create table frequency_policy (
    site_id     bigint primary key references site(id),
    mode        text not null check (mode in ('abc', 'risk', 'blend')),
    floor_a     bigint not null check (floor_a between 0 and 365),
    floor_b     bigint not null check (floor_b between 0 and 365),
    floor_c     bigint not null check (floor_c between 0 and 365),
    changed_at  bigint not null
);
insert into frequency_policy (site_id, mode, floor_a, floor_b, floor_c, changed_at)
    select id, 'abc', 12, 4, 1, 0 from site;

-- The figures behind a due task (JSON: the policy, the interval, the last count and,
-- under `risk` or `blend`, the risk score and where its error growth came from).
alter table count_task add column why text;

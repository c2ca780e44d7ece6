-- 0010: scheduled jobs claimed once per site and day, so several servers on one database
-- run a nightly job once (the first claim wins; the others skip it).
create table job_claim (
    site_id     bigint not null references site(id),
    job         text not null,
    day         text not null,
    claimed_by  text not null,
    claimed_at  bigint not null,
    primary key (site_id, job, day)
);

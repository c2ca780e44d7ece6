-- 0012: on PostgreSQL a result's pass, site and bin are checked by one foreign key (to the
-- pass with the same site and bin) instead of three, because there each check is a lookup
-- and a row lock per row written. SQLite's checks cost little and its schema stays as it
-- is; this file keeps the two stores' migration numbers in step.
select 1;

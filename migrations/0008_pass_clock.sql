-- A phone's clock is evidence, not truth (DESIGN §6). Each pass keeps the clock sample of
-- the sync that first carried it, so a later sync of the same pass can tell whether the
-- phone's clock stepped in between; `held` says, in plain words, why the pass's results
-- wait for a person (a stepped clock, a pass spanning hours). A held pass is never netted
-- as a hit.
alter table count_pass add column clock_offset_ms integer;
alter table count_pass add column clock_uncertainty_ms integer;
alter table count_pass add column clock_sampled_at integer;
alter table count_pass add column held text;

-- The person who made each event on the phone (the wire's `user`), kept with the event.
alter table sync_event add column made_by text not null default '';

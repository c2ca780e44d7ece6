-- The movement path asks, for every batch, how far back a done count pass can reach
-- (the widest clock uncertainty of the site's done passes). This index answers it from
-- its last entry instead of a walk over every pass.
create index count_pass_uncertainty on count_pass(site_id, uncertainty_ms) where done_at is not null;

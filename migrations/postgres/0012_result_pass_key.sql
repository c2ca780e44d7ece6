-- 0012: a result's pass, site and bin are checked by one foreign key, to the pass with the
-- same site and bin, instead of three (one each). Every check of a foreign key is a lookup
-- and a row lock per row written; netting writes tens of thousands of results at a time,
-- and the three checks were most of the cost of writing them. The one key checks more than
-- the three did: a result's site and bin must be its pass's. (The pass's own keys check
-- that its site and bin exist.)
create unique index count_pass_site_bin on count_pass(id, site_id, bin_id);

alter table count_result
    add constraint count_result_pass_site_bin
    foreign key (pass_id, site_id, bin_id) references count_pass(id, site_id, bin_id);

alter table count_result drop constraint count_result_pass_id_fkey;
alter table count_result drop constraint count_result_site_id_fkey;
alter table count_result drop constraint count_result_bin_id_fkey;

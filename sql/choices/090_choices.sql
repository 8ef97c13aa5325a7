-- One part of the long chooser-alternative table (087's rows): the occasions from
-- $first_occasion on and before $after_occasion (null: to the last). choices/build.py writes the
-- parts in occasion order, each on one thread, and commits them in that order, so `choices` is
-- stored in (occasion, alternative) order.
insert into choices
select * from choice_rows($outside, $first_occasion, $after_occasion)

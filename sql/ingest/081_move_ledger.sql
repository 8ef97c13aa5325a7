-- a file that moved (moves.py): every ledger row of its old path goes under the new one, so its
-- versions go on counting
update ledger
set path = $new_path
where source = $source and path = $old_path

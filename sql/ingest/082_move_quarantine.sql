-- a file that moved (moves.py): its quarantined lines name the new path
update quarantine
set path = $new_path
where source = $source and path = $old_path

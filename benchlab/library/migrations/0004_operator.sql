-- Version 4: who made each state change (the operator's name; the login name unless told otherwise).
ALTER TABLE state_changes ADD COLUMN operator TEXT;

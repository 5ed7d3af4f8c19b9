-- ohmsight run store, schema version 5: which pins the board lets the tool pull or drive.
--
-- A board's profile opts pins in, one by one, for pull tests (`may_pull`) and for being driven
-- (`may_drive`); the handshake reports both (protocol 5). Runs stored before this version were
-- made with boards that reported neither, and read as opted out.

ALTER TABLE channels ADD COLUMN may_pull BOOLEAN NOT NULL DEFAULT FALSE;
ALTER TABLE channels ADD COLUMN may_drive BOOLEAN NOT NULL DEFAULT FALSE;

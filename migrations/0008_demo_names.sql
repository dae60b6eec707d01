-- A demo's name, so a person can tell the demos of one camera apart ("tray along the left
-- edge"). Demos stored before names existed keep an empty name; the service shows them by their
-- upload time.
ALTER TABLE demos ADD COLUMN name TEXT NOT NULL DEFAULT '';

-- Events by structure: deleting a structure cascades to its events (and through them to
-- their deliveries), which without this index scans the whole events table.
CREATE INDEX events_by_structure ON events (structure_key);

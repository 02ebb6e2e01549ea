-- SPDX-License-Identifier: MIT
-- splitlot schema, version 3: where each device came from in its imported
-- file (the line of its first row), so a device met again later in the same
-- file is reported against that line without the import keeping every
-- device in memory.
ALTER TABLE device ADD COLUMN source_line INTEGER;  -- NULL for devices stored before version 3

-- Analyst view `quarantined_files`: every file the ingest step rejected, newest first. The file itself
-- and a readable rejection report stay in the workspace's quarantine/ folder.
--
-- Columns
--   rejected_at     TIMESTAMP of the rejection
--   file_name       name of the dropped file
--   kind            file kind guessed from the name prefix (NULL when the prefix is unknown)
--   reason          one-line reason; the report file holds every failed check with example rows
--   report_path     path of the rejection report (relative to the workspace or absolute, as recorded)
--   content_sha256  hash of the file's bytes (NULL when it could not be read)
CREATE OR REPLACE VIEW quarantined_files AS
SELECT rejected_at, file_name, kind, reason, report_path, content_sha256
FROM rejected_files
ORDER BY rejected_at DESC, file_name;

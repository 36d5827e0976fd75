-- 0003: every stage change is announced to every process sharing the database (LISTEN scorer_stages), so replicas
-- serve a promotion or a rollback at once instead of at their next rescan. The payload is "schema model"; a listener
-- keeps the notifications of its own schema. NOTIFY is delivered when the changing transaction commits, never before.
CREATE FUNCTION announce_stage_change() RETURNS trigger LANGUAGE plpgsql AS $$
BEGIN
    PERFORM pg_notify('scorer_stages', TG_TABLE_SCHEMA || ' ' || NEW.model);
    RETURN NULL;
END
$$;

CREATE TRIGGER stage_changes_announced AFTER INSERT ON stage_changes FOR EACH ROW EXECUTE FUNCTION announce_stage_change();

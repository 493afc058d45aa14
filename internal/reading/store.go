package reading

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"net/url"
	"strings"

	"brightfold/internal/inputerr"

	_ "modernc.org/sqlite" // pure-Go SQLite driver "sqlite"
)

// Format names a Brightfold session file in its meta table.
const Format = "brightfold-session"

// SchemaVersion is the schema this code writes (PRAGMA user_version).
const SchemaVersion = 1

// migrations[v] takes a file from schema version v to v+1.
var migrations = []string{
	// 0 → 1: the first schema.
	`CREATE TABLE meta (key TEXT PRIMARY KEY, value TEXT NOT NULL);
	CREATE TABLE cases (
		code TEXT PRIMARY KEY,
		position INTEGER NOT NULL UNIQUE,
		name TEXT NOT NULL,
		source TEXT NOT NULL,
		series TEXT NOT NULL DEFAULT '',
		truth INTEGER CHECK (truth IN (0, 1)),
		first_aided INTEGER NOT NULL DEFAULT 0 CHECK (first_aided IN (0, 1)));
	CREATE TABLE reads (
		id INTEGER PRIMARY KEY,
		code TEXT NOT NULL REFERENCES cases(code),
		phase TEXT NOT NULL CHECK (phase IN ('unaided', 'aided')),
		rating REAL NOT NULL CHECK (rating >= 0 AND rating <= 100),
		confidence INTEGER CHECK (confidence BETWEEN 1 AND 5),
		note TEXT NOT NULL DEFAULT '',
		opened TEXT,
		locked TEXT NOT NULL,
		sitting INTEGER NOT NULL DEFAULT 1,
		amends INTEGER REFERENCES reads(id));
	CREATE INDEX reads_case ON reads(code, phase);
	CREATE TABLE model_outputs (
		id INTEGER PRIMARY KEY,
		code TEXT NOT NULL REFERENCES cases(code),
		model_sha256 TEXT NOT NULL,
		model_name TEXT NOT NULL DEFAULT '',
		probability REAL NOT NULL CHECK (probability >= 0 AND probability <= 1),
		verdict TEXT NOT NULL DEFAULT '',
		shown TEXT NOT NULL);`,
}

// openDB opens the SQLite file at path; create sets WAL mode (a property
// of the file that persists). Every transaction starts IMMEDIATE so that
// two writers wait for each other (busy_timeout) instead of failing.
func openDB(path string, create bool) (*sql.DB, error) {
	q := url.Values{}
	q.Add("_pragma", "busy_timeout(10000)")
	q.Add("_pragma", "synchronous(FULL)")
	q.Add("_pragma", "foreign_keys(1)")
	if create {
		q.Add("_pragma", "journal_mode(WAL)")
	} else {
		q.Set("mode", "rw") // never create a file that is not there
	}
	q.Set("_txlock", "immediate")
	u := url.URL{Scheme: "file", Path: path, RawQuery: q.Encode()}
	db, err := sql.Open("sqlite", strings.Replace(u.String(), "file://", "file:", 1))
	if err != nil {
		return nil, fmt.Errorf("open session database: %w", err)
	}
	db.SetMaxOpenConns(1)
	if err := db.Ping(); err != nil {
		db.Close()
		return nil, inputerr.New(path, "not a readable session file: %v", sqliteReason(err))
	}
	return db, nil
}

// sqliteReason shortens a driver error to its message.
func sqliteReason(err error) string {
	s := err.Error()
	if i := strings.LastIndex(s, ": "); i >= 0 && strings.Contains(s, "SQLITE_") {
		return s[i+2:]
	}
	return s
}

// migrate brings the schema to SchemaVersion, one transaction per step.
func migrate(ctx context.Context, db *sql.DB, path string) error {
	v, err := schemaVersion(ctx, db, path)
	if err != nil {
		return err
	}
	if v > SchemaVersion {
		return inputerr.New(path, "session schema version %d is newer than this Brightfold reads (%d); update Brightfold", v, SchemaVersion)
	}
	for ; v < SchemaVersion; v++ {
		tx, err := db.BeginTx(ctx, nil)
		if err != nil {
			return fmt.Errorf("migrate session to schema %d: %w", v+1, err)
		}
		if _, err := tx.ExecContext(ctx, migrations[v]); err != nil {
			tx.Rollback()
			return fmt.Errorf("migrate session to schema %d: %w", v+1, err)
		}
		if _, err := tx.ExecContext(ctx, fmt.Sprintf("PRAGMA user_version = %d", v+1)); err != nil {
			tx.Rollback()
			return fmt.Errorf("migrate session to schema %d: %w", v+1, err)
		}
		if err := tx.Commit(); err != nil {
			return fmt.Errorf("migrate session to schema %d: %w", v+1, err)
		}
	}
	return nil
}

func schemaVersion(ctx context.Context, db *sql.DB, path string) (int, error) {
	var v int
	if err := db.QueryRowContext(ctx, "PRAGMA user_version").Scan(&v); err != nil {
		return 0, inputerr.New(path, "not a readable session file: %v", sqliteReason(err))
	}
	return v, nil
}

// checkFormat refuses SQLite files that are not Brightfold sessions.
func checkFormat(ctx context.Context, db *sql.DB, path string) error {
	v, err := schemaVersion(ctx, db, path)
	if err != nil {
		return err
	}
	if v == 0 {
		return inputerr.New(path, "not a Brightfold session file (no schema)")
	}
	if v > SchemaVersion {
		return inputerr.New(path, "session schema version %d is newer than this Brightfold reads (%d); update Brightfold", v, SchemaVersion)
	}
	var f string
	err = db.QueryRowContext(ctx, "SELECT value FROM meta WHERE key = 'format'").Scan(&f)
	if errors.Is(err, sql.ErrNoRows) || (err == nil && f != Format) {
		return inputerr.New(path, "not a Brightfold session file (format %q)", f)
	}
	if err != nil {
		return inputerr.New(path, "not a readable session file: %v", sqliteReason(err))
	}
	return nil
}

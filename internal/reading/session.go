package reading

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strconv"
	"time"

	"brightfold/internal/inputerr"
	"brightfold/internal/notice"
)

// Design is how unaided and aided reads are arranged.
type Design string

// The reading designs.
const (
	// Sequential: each case is read unaided, that read is locked, then the
	// model's evidence is shown and the aided read is recorded.
	Sequential Design = "sequential"
	// Crossover: each case is read once aided and once unaided in two
	// sittings, half the cases aided in the first.
	Crossover Design = "crossover"
)

// Phase is the condition of a read.
type Phase string

// The reading conditions.
const (
	Unaided Phase = "unaided"
	Aided   Phase = "aided"
)

// DefaultWashoutDays is the default least gap between crossover sittings
// (common practice in reader studies: readers forget cases slowly).
const DefaultWashoutDays = 14

// Options describe a new session.
type Options struct {
	Reader      string
	Design      Design // "" means Sequential
	Seed        uint64 // shuffles the case order (and the crossover halves)
	WashoutDays int    // crossover only; 0 means DefaultWashoutDays
	Now         time.Time
}

// Meta is what a session records about itself.
type Meta struct {
	Reader      string
	Design      Design
	Seed        uint64
	WashoutDays int
	Created     time.Time
}

// Session is an open session file.
type Session struct {
	db   *sql.DB
	path string
	Meta Meta
}

// SessionCase is a case of a session in reading order.
type SessionCase struct {
	Case
	Code       string // the case code shown in Meeting mode and exported
	Position   int    // 1-based place in the reading order
	FirstAided bool   // crossover: read aided in the first sitting
}

// Create makes a new session file at path (refusing an existing file); the
// file appears complete or not at all.
func Create(path string, cases []Case, opts Options) (*Session, error) {
	if opts.Reader == "" {
		return nil, inputerr.New("", "a session needs a reader name (--reader)")
	}
	if opts.Design == "" {
		opts.Design = Sequential
	}
	if opts.Design != Sequential && opts.Design != Crossover {
		return nil, inputerr.New("", "unknown design %q (sequential or crossover)", opts.Design)
	}
	if opts.WashoutDays == 0 {
		opts.WashoutDays = DefaultWashoutDays
	}
	if opts.WashoutDays < 0 {
		return nil, inputerr.New("", "washout days %d is negative", opts.WashoutDays)
	}
	if len(cases) == 0 || len(cases) > maxCases {
		return nil, inputerr.New("", "%d cases: a session holds 1 to %d", len(cases), maxCases)
	}
	if opts.Now.IsZero() {
		opts.Now = time.Now()
	}
	if _, err := os.Lstat(path); err == nil {
		return nil, inputerr.New(path, "exists already; choose another --out or remove it")
	}
	tmp := filepath.Join(filepath.Dir(path), "."+filepath.Base(path)+".new")
	os.Remove(tmp)
	if err := writeNew(tmp, cases, opts); err != nil {
		os.Remove(tmp)
		return nil, err
	}
	if err := os.Rename(tmp, path); err != nil {
		os.Remove(tmp)
		return nil, fmt.Errorf("create session: %w", err)
	}
	return Open(path)
}

func writeNew(tmp string, cases []Case, opts Options) error {
	ctx := context.Background()
	db, err := openDB(tmp, true)
	if err != nil {
		return err
	}
	defer db.Close()
	if err := migrate(ctx, db, tmp); err != nil {
		return err
	}
	tx, err := db.BeginTx(ctx, nil)
	if err != nil {
		return fmt.Errorf("create session: %w", err)
	}
	defer tx.Rollback()
	meta := map[string]string{
		"format": Format, "reader": opts.Reader, "design": string(opts.Design),
		"seed": strconv.FormatUint(opts.Seed, 10), "washout_days": strconv.Itoa(opts.WashoutDays),
		"created": stamp(opts.Now), "notice": notice.Full,
	}
	for k, v := range meta {
		if _, err := tx.ExecContext(ctx, "INSERT INTO meta (key, value) VALUES (?, ?)", k, v); err != nil {
			return fmt.Errorf("create session: %w", err)
		}
	}
	order, firstAided := shuffle(len(cases), opts.Seed, opts.Design)
	width := max(3, len(strconv.Itoa(len(cases))))
	for i, c := range cases {
		var truth any
		if c.Truth == 0 || c.Truth == 1 {
			truth = c.Truth
		}
		code := fmt.Sprintf("C%0*d", width, i+1)
		if _, err := tx.ExecContext(ctx, `INSERT INTO cases (code, position, name, source, series, truth, first_aided)
			VALUES (?, ?, ?, ?, ?, ?, ?)`, code, order[i]+1, c.Name, c.Source, c.Series, truth, firstAided[i]); err != nil {
			return fmt.Errorf("create session: %w", err)
		}
	}
	if err := tx.Commit(); err != nil {
		return fmt.Errorf("create session: %w", err)
	}
	// Fold the write-ahead log into the file before it is renamed.
	if _, err := db.ExecContext(ctx, "PRAGMA wal_checkpoint(TRUNCATE)"); err != nil {
		return fmt.Errorf("create session: %w", err)
	}
	return nil
}

// shuffle returns each case's 0-based place in the reading order and, for
// crossover, whether it is read aided first (half of the cases, rounded down).
// Codes follow the sorted case list, so that every reader given the same list
// gets the same codes whatever the seed.
func shuffle(n int, seed uint64, d Design) (order []int, firstAided []int) {
	rng := rand.New(rand.NewPCG(seed, 0x62726967687466)) // fixed stream: same seed, same order
	order = rng.Perm(n)
	firstAided = make([]int, n)
	if d == Crossover {
		for i, p := range rng.Perm(n) {
			if p < n/2 {
				firstAided[i] = 1
			}
		}
	}
	return order, firstAided
}

func stamp(t time.Time) string { return t.UTC().Format(time.RFC3339Nano) }

func parseStamp(s string) time.Time {
	t, _ := time.Parse(time.RFC3339Nano, s)
	return t
}

// Open opens an existing session file, migrating an older schema.
func Open(path string) (*Session, error) {
	st, err := os.Stat(path)
	if err != nil {
		return nil, inputerr.Wrap(path, err)
	}
	if st.IsDir() {
		return nil, inputerr.New(path, "is a folder, not a session file")
	}
	db, err := openDB(path, false)
	if err != nil {
		return nil, err
	}
	s := &Session{db: db, path: path}
	if err := s.load(); err != nil {
		db.Close()
		return nil, err
	}
	return s, nil
}

func (s *Session) load() error {
	ctx := context.Background()
	v, err := schemaVersion(ctx, s.db, s.path)
	if err != nil {
		return err
	}
	if v > 0 && v < SchemaVersion {
		if err := migrate(ctx, s.db, s.path); err != nil {
			return err
		}
	}
	if err := checkFormat(ctx, s.db, s.path); err != nil {
		return err
	}
	rows, err := s.db.QueryContext(ctx, "SELECT key, value FROM meta")
	if err != nil {
		return inputerr.New(s.path, "read session: %v", sqliteReason(err))
	}
	defer rows.Close()
	m := map[string]string{}
	for rows.Next() {
		var k, v string
		if err := rows.Scan(&k, &v); err != nil {
			return inputerr.New(s.path, "read session: %v", sqliteReason(err))
		}
		m[k] = v
	}
	if err := rows.Err(); err != nil {
		return inputerr.New(s.path, "read session: %v", sqliteReason(err))
	}
	s.Meta = Meta{Reader: m["reader"], Design: Design(m["design"]), Created: parseStamp(m["created"])}
	s.Meta.Seed, _ = strconv.ParseUint(m["seed"], 10, 64)
	s.Meta.WashoutDays, _ = strconv.Atoi(m["washout_days"])
	if s.Meta.Design != Sequential && s.Meta.Design != Crossover {
		return inputerr.New(s.path, "unknown design %q", s.Meta.Design)
	}
	return nil
}

// Path is the session file's path.
func (s *Session) Path() string { return s.path }

// Close closes the session file.
func (s *Session) Close() error { return s.db.Close() }

// Cases lists the session's cases in reading order.
func (s *Session) Cases() ([]SessionCase, error) {
	rows, err := s.db.Query(`SELECT code, position, name, source, series, truth, first_aided
		FROM cases ORDER BY position`)
	if err != nil {
		return nil, inputerr.New(s.path, "read cases: %v", sqliteReason(err))
	}
	defer rows.Close()
	var out []SessionCase
	for rows.Next() {
		var c SessionCase
		var truth sql.NullInt64
		var fa int
		if err := rows.Scan(&c.Code, &c.Position, &c.Name, &c.Source, &c.Series, &truth, &fa); err != nil {
			return nil, inputerr.New(s.path, "read cases: %v", sqliteReason(err))
		}
		c.Truth = -1
		if truth.Valid {
			c.Truth = int(truth.Int64)
		}
		c.FirstAided = fa == 1
		out = append(out, c)
	}
	if err := rows.Err(); err != nil {
		return nil, inputerr.New(s.path, "read cases: %v", sqliteReason(err))
	}
	return out, nil
}

// validRating checks a probability rating (0–100) and a confidence (0 = none, 1–5).
func validRating(rating float64, confidence int) error {
	if math.IsNaN(rating) || rating < 0 || rating > 100 {
		return fmt.Errorf("rating %g is not a probability from 0 to 100", rating)
	}
	if confidence < 0 || confidence > 5 {
		return fmt.Errorf("confidence %d is not from 1 to 5", confidence)
	}
	return nil
}

// ErrRule marks a read refused by the session's design.
var ErrRule = errors.New("not allowed by the session")

// IntegrityCheck runs SQLite's PRAGMA integrity_check and returns its first
// line ("ok" when the file is sound).
func (s *Session) IntegrityCheck() (string, error) {
	var res string
	if err := s.db.QueryRow("PRAGMA integrity_check").Scan(&res); err != nil {
		return "", fmt.Errorf("%s: integrity check: %w", s.path, err)
	}
	return res, nil
}

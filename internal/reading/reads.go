package reading

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"strings"
	"time"

	"brightfold/internal/inputerr"
)

// Read is one read to record.
type Read struct {
	Code       string
	Phase      Phase
	Rating     float64 // the reader's probability that the pattern is present, 0–100
	Confidence int     // 1–5, 0 for none
	Note       string
	Opened     time.Time // when the case was opened for this read; zero if unknown
	Locked     time.Time // when the read was locked; zero means now
	// Amend records a dated amendment of the locked read of this case and
	// phase; without it a second read of the same case and phase is refused.
	Amend bool
}

// Recorded is the outcome of a recorded read.
type Recorded struct {
	ID      int64
	Sitting int    // 1 or 2 (crossover); 1 for sequential
	Warning string // e.g. a crossover washout that has not passed
}

// StoredRead is a read as stored, with its amendment link.
type StoredRead struct {
	ID         int64
	Code       string
	Phase      Phase
	Rating     float64
	Confidence int
	Note       string
	Opened     time.Time
	Locked     time.Time
	Sitting    int
	Amends     int64 // the read this one amends, 0 for an original read
}

// maxNote bounds a note (a few paragraphs).
const maxNote = 8192

// Record checks r against the session's design and stores it, locked, in
// one transaction: either all of it is in the file or none.
func (s *Session) Record(r Read) (Recorded, error) {
	if err := validRating(r.Rating, r.Confidence); err != nil {
		return Recorded{}, inputerr.New(s.path, "case %s: %v", r.Code, err)
	}
	if r.Phase != Unaided && r.Phase != Aided {
		return Recorded{}, inputerr.New(s.path, "phase %q is not unaided or aided", r.Phase)
	}
	if len(r.Note) > maxNote {
		return Recorded{}, inputerr.New(s.path, "note of %d bytes is longer than %d", len(r.Note), maxNote)
	}
	if r.Locked.IsZero() {
		r.Locked = time.Now()
	}
	ctx := context.Background()
	tx, err := s.db.BeginTx(ctx, nil)
	if err != nil {
		return Recorded{}, fmt.Errorf("%s: record read: %w", s.path, err)
	}
	defer tx.Rollback()
	out, err := s.checkRules(ctx, tx, r)
	if err != nil {
		return Recorded{}, err
	}
	var opened, conf any
	if !r.Opened.IsZero() {
		opened = stamp(r.Opened)
	}
	if r.Confidence > 0 {
		conf = r.Confidence
	}
	var amends any
	if r.Amend {
		amends = out.ID // checkRules put the amended read's id here
	}
	res, err := tx.ExecContext(ctx, `INSERT INTO reads (code, phase, rating, confidence, note, opened, locked, sitting, amends)
		VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)`, r.Code, string(r.Phase), r.Rating, conf, r.Note, opened, stamp(r.Locked), out.Sitting, amends)
	if err != nil {
		return Recorded{}, fmt.Errorf("%s: record read: %w", s.path, err)
	}
	if out.ID, err = res.LastInsertId(); err != nil {
		return Recorded{}, fmt.Errorf("%s: record read: %w", s.path, err)
	}
	if err := tx.Commit(); err != nil {
		return Recorded{}, fmt.Errorf("%s: record read: %w", s.path, err)
	}
	return out, nil
}

// checkRules applies the design's rules to r; for an amendment it returns
// the id of the latest read of that case and phase in ID.
func (s *Session) checkRules(ctx context.Context, tx *sql.Tx, r Read) (Recorded, error) {
	var firstAided int
	err := tx.QueryRowContext(ctx, "SELECT first_aided FROM cases WHERE code = ?", r.Code).Scan(&firstAided)
	if errors.Is(err, sql.ErrNoRows) {
		return Recorded{}, inputerr.New(s.path, "no case %q in this session", r.Code)
	}
	if err != nil {
		return Recorded{}, fmt.Errorf("%s: record read: %w", s.path, err)
	}
	latest := func(p Phase) (int64, error) {
		var id int64
		err := tx.QueryRowContext(ctx, "SELECT id FROM reads WHERE code = ? AND phase = ? ORDER BY id DESC LIMIT 1", r.Code, string(p)).Scan(&id)
		if errors.Is(err, sql.ErrNoRows) {
			return 0, nil
		}
		return id, err
	}
	out := Recorded{Sitting: 1}
	same, err := latest(r.Phase)
	if err != nil {
		return Recorded{}, fmt.Errorf("%s: record read: %w", s.path, err)
	}
	switch {
	case same != 0 && !r.Amend:
		return Recorded{}, inputerr.New(s.path, "case %s: the %s read is locked; record an amendment instead", r.Code, r.Phase)
	case same == 0 && r.Amend:
		return Recorded{}, inputerr.New(s.path, "case %s: no %s read to amend", r.Code, r.Phase)
	}
	out.ID = same
	first := Unaided
	if s.Meta.Design == Crossover && firstAided == 1 {
		first = Aided
	}
	if r.Phase == first {
		return out, nil
	}
	prior, err := latest(first)
	if err != nil {
		return Recorded{}, fmt.Errorf("%s: record read: %w", s.path, err)
	}
	if prior == 0 {
		if s.Meta.Design == Sequential {
			return Recorded{}, inputerr.New(s.path, "case %s: the unaided read must be locked before the aided read (sequential design)", r.Code)
		}
		return Recorded{}, inputerr.New(s.path, "case %s: read %s in the first sitting before %s in the second (crossover design)", r.Code, first, r.Phase)
	}
	if s.Meta.Design == Crossover {
		out.Sitting = 2
		out.Warning, err = s.washoutWarning(ctx, tx, r.Locked)
		if err != nil {
			return Recorded{}, err
		}
	}
	return out, nil
}

// washoutWarning says when a second-sitting read comes less than the washout
// after the first sitting's last read.
func (s *Session) washoutWarning(ctx context.Context, tx *sql.Tx, at time.Time) (string, error) {
	var last sql.NullString
	if err := tx.QueryRowContext(ctx, "SELECT MAX(locked) FROM reads WHERE sitting = 1").Scan(&last); err != nil {
		return "", fmt.Errorf("%s: record read: %w", s.path, err)
	}
	if !last.Valid {
		return "", nil
	}
	gap := at.Sub(parseStamp(last.String))
	washout := time.Duration(s.Meta.WashoutDays) * 24 * time.Hour
	if gap >= washout {
		return "", nil
	}
	return fmt.Sprintf("second sitting %.1f days after the first sitting's last read, less than the %d-day washout; memory of the first reads may bias these",
		gap.Hours()/24, s.Meta.WashoutDays), nil
}

// Reads lists every stored read (amendments included) in the order recorded.
func (s *Session) Reads() ([]StoredRead, error) {
	rows, err := s.db.Query(`SELECT id, code, phase, rating, confidence, note, opened, locked, sitting, amends
		FROM reads ORDER BY id`)
	if err != nil {
		return nil, inputerr.New(s.path, "read reads: %v", sqliteReason(err))
	}
	defer rows.Close()
	var out []StoredRead
	for rows.Next() {
		var r StoredRead
		var conf, amends sql.NullInt64
		var opened sql.NullString
		var locked, phase string
		if err := rows.Scan(&r.ID, &r.Code, &phase, &r.Rating, &conf, &r.Note, &opened, &locked, &r.Sitting, &amends); err != nil {
			return nil, inputerr.New(s.path, "read reads: %v", sqliteReason(err))
		}
		r.Phase, r.Confidence, r.Amends = Phase(phase), int(conf.Int64), amends.Int64
		if opened.Valid {
			r.Opened = parseStamp(opened.String)
		}
		r.Locked = parseStamp(locked)
		out = append(out, r)
	}
	if err := rows.Err(); err != nil {
		return nil, inputerr.New(s.path, "read reads: %v", sqliteReason(err))
	}
	return out, nil
}

// Current is the read of one case and phase that counts: the latest of the
// original read and its amendments.
type Current struct {
	StoredRead
	Amendments int       // how many times the original read was amended
	Original   time.Time // when the original read was locked
	FirstOpen  time.Time // when the case was first opened for this phase
}

// CurrentReads returns, per case code and phase, the read that counts.
func (s *Session) CurrentReads() (map[string]map[Phase]Current, error) {
	all, err := s.Reads()
	if err != nil {
		return nil, err
	}
	out := map[string]map[Phase]Current{}
	for _, r := range all {
		if out[r.Code] == nil {
			out[r.Code] = map[Phase]Current{}
		}
		c, seen := out[r.Code][r.Phase]
		if !seen {
			c = Current{Original: r.Locked, FirstOpen: r.Opened}
		} else {
			c.Amendments++
		}
		c.StoredRead = r
		out[r.Code][r.Phase] = c
	}
	return out, nil
}

// Seconds is the time spent on the original read (opened to locked), or -1
// when the opening time is unknown.
func (c Current) Seconds() float64 {
	if c.FirstOpen.IsZero() || c.Original.Before(c.FirstOpen) {
		return -1
	}
	return c.Original.Sub(c.FirstOpen).Seconds()
}

// ModelOutput is the model's output for a case as shown to the reader.
type ModelOutput struct {
	Code        string
	ModelSHA256 string // of the model folder
	ModelName   string
	Probability float64 // 0–1
	Verdict     string  // the fit check's verdict
	Shown       time.Time
}

// RecordModelOutput stores what the model showed for a case. In a
// sequential session it is refused before the case's unaided read is locked:
// the model must not be seen before the reader's own judgement is recorded.
func (s *Session) RecordModelOutput(m ModelOutput) error {
	if m.Probability < 0 || m.Probability > 1 || m.Probability != m.Probability {
		return inputerr.New(s.path, "case %s: model probability %g is not from 0 to 1", m.Code, m.Probability)
	}
	if len(m.ModelSHA256) != 64 || strings.Trim(strings.ToLower(m.ModelSHA256), "0123456789abcdef") != "" {
		return inputerr.New(s.path, "case %s: model sha256 %q is not 64 hex digits", m.Code, m.ModelSHA256)
	}
	if m.Shown.IsZero() {
		m.Shown = time.Now()
	}
	ctx := context.Background()
	tx, err := s.db.BeginTx(ctx, nil)
	if err != nil {
		return fmt.Errorf("%s: record model output: %w", s.path, err)
	}
	defer tx.Rollback()
	var firstAided, unaided int
	err = tx.QueryRowContext(ctx, `SELECT first_aided, (SELECT COUNT(*) FROM reads WHERE code = ? AND phase = 'unaided')
		FROM cases WHERE code = ?`, m.Code, m.Code).Scan(&firstAided, &unaided)
	if errors.Is(err, sql.ErrNoRows) {
		return inputerr.New(s.path, "no case %q in this session", m.Code)
	}
	if err != nil {
		return fmt.Errorf("%s: record model output: %w", s.path, err)
	}
	if s.Meta.Design == Sequential && unaided == 0 {
		return inputerr.New(s.path, "case %s: the model is shown only after the unaided read is locked (sequential design)", m.Code)
	}
	if _, err := tx.ExecContext(ctx, `INSERT INTO model_outputs (code, model_sha256, model_name, probability, verdict, shown)
		VALUES (?, ?, ?, ?, ?, ?)`, m.Code, strings.ToLower(m.ModelSHA256), m.ModelName, m.Probability, m.Verdict, stamp(m.Shown)); err != nil {
		return fmt.Errorf("%s: record model output: %w", s.path, err)
	}
	if err := tx.Commit(); err != nil {
		return fmt.Errorf("%s: record model output: %w", s.path, err)
	}
	return nil
}

// ModelOutputs lists the latest model output shown per case code.
func (s *Session) ModelOutputs() (map[string]ModelOutput, error) {
	rows, err := s.db.Query(`SELECT code, model_sha256, model_name, probability, verdict, shown FROM model_outputs ORDER BY id`)
	if err != nil {
		return nil, inputerr.New(s.path, "read model outputs: %v", sqliteReason(err))
	}
	defer rows.Close()
	out := map[string]ModelOutput{}
	for rows.Next() {
		var m ModelOutput
		var shown string
		if err := rows.Scan(&m.Code, &m.ModelSHA256, &m.ModelName, &m.Probability, &m.Verdict, &shown); err != nil {
			return nil, inputerr.New(s.path, "read model outputs: %v", sqliteReason(err))
		}
		m.Shown = parseStamp(shown)
		out[m.Code] = m
	}
	if err := rows.Err(); err != nil {
		return nil, inputerr.New(s.path, "read model outputs: %v", sqliteReason(err))
	}
	return out, nil
}

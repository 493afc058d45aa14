// Package inputerr marks errors caused by the user's input (a bad file, a
// wrong model, a usage mistake) so that the command line can exit with code 2
// and print one line naming the file and the problem.
package inputerr

import (
	"errors"
	"fmt"
)

// Error is a problem with a named input.
type Error struct {
	Path string // the file or folder at fault; may be empty for usage errors
	Err  error
}

// Error formats as "PATH: problem".
func (e *Error) Error() string {
	if e.Path == "" {
		return e.Err.Error()
	}
	return e.Path + ": " + e.Err.Error()
}

// Unwrap returns the underlying problem.
func (e *Error) Unwrap() error { return e.Err }

// New returns an input error for path with a formatted message.
func New(path, format string, args ...any) error {
	return &Error{Path: path, Err: fmt.Errorf(format, args...)}
}

// Wrap marks err as an input error for path; nil stays nil.
func Wrap(path string, err error) error {
	if err == nil {
		return nil
	}
	var ie *Error
	if errors.As(err, &ie) {
		return err
	}
	return &Error{Path: path, Err: err}
}

// Is reports whether err (or anything it wraps) is an input error.
func Is(err error) bool {
	var ie *Error
	return errors.As(err, &ie)
}

// Package langenv, imported for its side effect by the command, keeps the
// GUI toolkit's locale lookup quiet under the C.UTF-8 locale that servers and
// CI machines use: that lookup reads the language "C", cannot parse it, and
// logs an error on every start, even for headless commands. When the
// effective locale's language is C or POSIX and LANGUAGE is unset, LANGUAGE
// is set to "en" for this process (it only affects message translation).
//
// It must stay free of dependencies other than the standard library so that
// it is initialised before the toolkit (Go initialises ready packages in
// import-path order).
package langenv

import (
	"os"
	"strings"
)

func init() {
	if os.Getenv("LANGUAGE") != "" {
		return
	}
	loc := ""
	for _, k := range []string{"LC_ALL", "LC_MESSAGES", "LANG"} {
		if loc = os.Getenv(k); loc != "" {
			break
		}
	}
	lang, _, _ := strings.Cut(loc, ".")
	if (lang == "C" || lang == "POSIX") && loc != lang {
		os.Setenv("LANGUAGE", "en")
	}
}

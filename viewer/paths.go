package viewer

import (
	"regexp"
	"strings"
)

// pathPattern matches one absolute or home-relative file path in free text,
// in two groups: what stands before it and the path.
//
//   - A path starts at the beginning of the text or after a space, quote,
//     bracket or "=" (so "input/bias" or "2026/12/03" are words, not paths),
//     with "/", "\", "~/" or a drive letter.
//   - Folder names may hold spaces ("/root/Roe Jane 1953/exports/") but
//     neither start nor end with one, so a path never runs across the
//     words between two paths: in "/a/x.png and /tmp/y" the text "x.png and "
//     ends in a space before the next "/", so it is no folder name.
//   - The last name holds no spaces, quotes, brackets, commas or
//     semicolons, which in running text end a path.
//
// A file name with spaces at the end of a path is cut at its first space;
// the text cannot say where such a name ends.
var pathPattern = regexp.MustCompile(`(^|[\s"'(\[=])((?:~|[A-Za-z]:)?[/\\](?:[^\s/\\"'<>|:;](?:[^/\\\n"'<>|:;]*[^\s/\\"'<>|:;])?[/\\])*[^\s"'<>|:;,()\[\]/\\]*)`)

// HidePaths replaces every file path in s by mark, whole (folder names with
// spaces included) and nothing but the path: the words around and between
// paths stay. A lone separator ("1 / 2") is no path.
func HidePaths(s, mark string) string {
	var b strings.Builder
	last := 0
	for _, m := range pathPattern.FindAllStringSubmatchIndex(s, -1) {
		start, end := m[4], m[5]
		if end-start < 2 {
			continue
		}
		b.WriteString(s[last:start])
		b.WriteString(mark)
		last = end
	}
	b.WriteString(s[last:])
	return b.String()
}

// ElidePath shortens path p for a line with limited room: p itself when
// fits says it fits, else its first folder, an ellipsis and as many of its
// last names as fit ("/tmp/…/HMRU-0001/dicom"), else an ellipsis and its
// last name ("…/dicom"), which is returned even if it does not fit.
func ElidePath(p string, fits func(string) bool) string {
	if fits(p) {
		return p
	}
	sep := "/"
	if strings.Contains(p, `\`) && !strings.Contains(p, "/") {
		sep = `\`
	}
	parts := strings.Split(p, sep)
	if len(parts) < 2 {
		return p
	}
	first := parts[0] + sep
	if parts[0] == "" && len(parts) > 2 {
		first = sep + parts[1] + sep
		parts = parts[1:]
	}
	for k := len(parts) - 2; k >= 1; k-- {
		s := first + "…" + sep + strings.Join(parts[len(parts)-k:], sep)
		if fits(s) {
			return s
		}
	}
	return "…" + sep + parts[len(parts)-1]
}

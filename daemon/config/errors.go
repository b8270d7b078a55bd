package config

import (
	"strconv"
	"strings"
)

// Error is one problem in a configuration file: where it is and what is
// wrong.
type Error struct {
	File string // the name the configuration was loaded or parsed under, as given
	Line int    // 1-based line; 0 when the problem concerns the whole file
	Path string // field path such as heads[1].channels[0].band.from; empty for YAML syntax errors
	Msg  string
}

// Error formats the problem as "FILE:LINE: PATH: MSG". The line is left
// out when it is 0 and the path when it is empty.
func (e *Error) Error() string {
	var b strings.Builder
	b.WriteString(e.File)
	if e.Line > 0 {
		b.WriteByte(':')
		b.WriteString(strconv.Itoa(e.Line))
	}
	b.WriteString(": ")
	if e.Path != "" {
		b.WriteString(e.Path)
		b.WriteString(": ")
	}
	b.WriteString(e.Msg)
	return b.String()
}

// Errors is every problem found in one configuration file, sorted by line.
// Parse and Load return it as their error when there is any problem; use
// errors.As to get at the individual problems.
type Errors []*Error

// Error joins the problems, one per line.
func (es Errors) Error() string {
	lines := make([]string, len(es))
	for i, e := range es {
		lines[i] = e.Error()
	}
	return strings.Join(lines, "\n")
}

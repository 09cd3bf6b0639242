package report

import (
	"encoding/xml"
	"fmt"
	"io"
	"strings"

	"github.com/loadline/loadline/budget"
	"github.com/loadline/loadline/internal/display"
)

// CheckJUnit writes the result as JUnit XML for CI test views: one
// testsuite per model (named by its path), one testcase per check (named by
// its metric, classname the model path). A failed check is a <failure>
// carrying its reason; a warning passes with the reason in <system-out>; a
// waived check is <skipped> with the waiver's reason. A model that could
// not be measured is one <error> case, a model no rule covers one skipped
// case; removed models, having nothing to check, are left out. Problems in
// the budget file become the cases of a last suite, "budget file": a
// failing finding (an expired waiver, rules that disagree) a <failure>, a
// warning a passing case with the problem in <system-out>.
func CheckJUnit(w io.Writer, r *budget.Result) error {
	r = display.Copy(r) // paths and names from outside, escaped
	doc := junitSuites{Name: "loadline check", Time: "0"}
	for _, m := range ordered(r.Models) {
		s := junitSuite{Name: m.Path}
		prop := func(name, value string) {
			if value == "" {
				return
			}
			if s.Properties == nil {
				s.Properties = &junitProperties{}
			}
			s.Properties.List = append(s.Properties.List, junitProperty{name, value})
		}
		prop("change", string(m.Change))
		prop("old_path", m.OldPath)
		prop("device", m.Device)
		prop("rule", m.Rule)
		switch {
		case m.Error != "":
			s.add(junitCase{Name: "measure", Error: &junitProblem{
				Message: oneLine(m.Error), Type: "unmeasured", Text: m.Error}})
		case m.Unbudgeted:
			s.add(junitCase{Name: "budget rule", Skipped: &junitSkipped{Message: modelNote(m)}})
		}
		for i := range m.Checks {
			s.add(junitCheck(m, &m.Checks[i]))
		}
		if len(m.Notes) > 0 && len(s.Cases) > 0 {
			s.SystemOut = strings.Join(m.Notes, "\n")
		}
		if len(s.Cases) == 0 {
			continue
		}
		doc.add(s)
	}
	if fs := findings(r); len(fs) > 0 {
		s := junitSuite{Name: "budget file"}
		for i, f := range fs {
			tc := junitCase{Name: fmt.Sprintf("problem %d", i+1)}
			if f.level == budget.Fail {
				tc.Failure = &junitProblem{Message: f.text, Type: "budget"}
			} else {
				tc.SystemOut = "warn: " + f.text
			}
			s.add(tc)
		}
		doc.add(s)
	}
	if _, err := io.WriteString(w, xml.Header); err != nil {
		return err
	}
	enc := xml.NewEncoder(w)
	enc.Indent("", "  ")
	if err := enc.Encode(doc); err != nil {
		return err
	}
	_, err := io.WriteString(w, "\n")
	return err
}

func junitCheck(m *budget.ModelResult, c *budget.Check) junitCase {
	rc := cells(m, c)
	figures := fmt.Sprintf("%s: head %s, base %s, delta %s, limit %s, headroom %s",
		rc.metric, rc.head, rc.base, rc.delta, rc.limit, rc.headroom)
	if c.Source != "" {
		figures += "\nset at " + c.Source
	}
	tc := junitCase{Name: metricLabel(c)}
	switch c.Status {
	case budget.Fail:
		tc.Failure = &junitProblem{Message: oneLine(c.Reason), Type: c.Kind, Text: figures}
	case budget.Warn:
		tc.SystemOut = "warn: " + oneLine(c.Reason) + "\n" + figures
	case budget.Waived:
		msg := "waived"
		if c.Waiver != nil {
			msg = "waived " + waiverText(c.Waiver)
		}
		tc.Skipped = &junitSkipped{Message: msg}
		tc.SystemOut = withWaiver(c) + "\n" + figures
	default:
		tc.SystemOut = figures
	}
	return tc
}

// The JUnit elements, in the shape most CI test views read (the Ant
// schema's names and attributes); time is always 0, since nothing is timed.
type junitSuites struct {
	XMLName  xml.Name     `xml:"testsuites"`
	Name     string       `xml:"name,attr"`
	Tests    int          `xml:"tests,attr"`
	Failures int          `xml:"failures,attr"`
	Errors   int          `xml:"errors,attr"`
	Skipped  int          `xml:"skipped,attr"`
	Time     string       `xml:"time,attr"`
	Suites   []junitSuite `xml:"testsuite"`
}

type junitSuite struct {
	Name       string           `xml:"name,attr"`
	Tests      int              `xml:"tests,attr"`
	Failures   int              `xml:"failures,attr"`
	Errors     int              `xml:"errors,attr"`
	Skipped    int              `xml:"skipped,attr"`
	Time       string           `xml:"time,attr"`
	Properties *junitProperties `xml:"properties,omitempty"`
	Cases      []junitCase      `xml:"testcase"`
	SystemOut  string           `xml:"system-out,omitempty"`
}

type junitProperties struct {
	List []junitProperty `xml:"property"`
}

type junitProperty struct {
	Name  string `xml:"name,attr"`
	Value string `xml:"value,attr"`
}

type junitCase struct {
	Name      string        `xml:"name,attr"`
	Classname string        `xml:"classname,attr"`
	Time      string        `xml:"time,attr"`
	Failure   *junitProblem `xml:"failure,omitempty"`
	Error     *junitProblem `xml:"error,omitempty"`
	Skipped   *junitSkipped `xml:"skipped,omitempty"`
	SystemOut string        `xml:"system-out,omitempty"`
}

type junitProblem struct {
	Message string `xml:"message,attr"`
	Type    string `xml:"type,attr,omitempty"`
	Text    string `xml:",chardata"`
}

type junitSkipped struct {
	Message string `xml:"message,attr"`
}

func (s *junitSuite) add(c junitCase) {
	c.Classname = s.Name
	c.Time = "0"
	s.Tests++
	switch {
	case c.Failure != nil:
		s.Failures++
	case c.Error != nil:
		s.Errors++
	case c.Skipped != nil:
		s.Skipped++
	}
	s.Cases = append(s.Cases, c)
}

func (d *junitSuites) add(s junitSuite) {
	s.Time = "0"
	d.Tests += s.Tests
	d.Failures += s.Failures
	d.Errors += s.Errors
	d.Skipped += s.Skipped
	d.Suites = append(d.Suites, s)
}

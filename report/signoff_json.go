package report

import (
	"io"
	"time"

	"github.com/loadline/loadline/budget"
)

// The JSON form of the sign-off report (loadline.signoff/v1): the facts of
// the HTML page and the markdown, as data. Keys are added, never renamed.
type signoffJSON struct {
	Schema          string               `json:"schema"`
	Revision        budget.Revision      `json:"revision"`
	Date            time.Time            `json:"date"`
	BudgetFile      string               `json:"budget_file"`
	BudgetBlob      string               `json:"budget_blob"`
	AnalyzerVersion string               `json:"analyzer_version"`
	Tool            string               `json:"tool"`
	Verdict         budget.Status        `json:"verdict"`
	Summary         string               `json:"summary"`
	Missing         []string             `json:"missing"`
	Devices         []deviceJSON         `json:"devices"`
	Waivers         []waiverJSON         `json:"waivers"`
	Unmeasured      []budget.ModelResult `json:"unmeasured"`
	Unbudgeted      []budget.ModelResult `json:"unbudgeted"`
	Unassigned      []budget.ModelResult `json:"unassigned"`
	ChangesSince    string               `json:"changes_since"`
	Changes         []changeJSON         `json:"changes"`
	Profiles        []profileJSON        `json:"profiles"`
	Releases        []releaseJSON        `json:"releases"`
	Problems        []budget.Finding     `json:"problems"`
}

type deviceJSON struct {
	budget.DeviceCapacity
	Verdict budget.Status        `json:"verdict"`
	Models  []budget.ModelResult `json:"models"`
	Totals  *budget.DeviceResult `json:"totals"`
	Trends  []trendJSON          `json:"trends"`
	Shares  []shareJSON          `json:"shares"`
}

type trendJSON struct {
	Metric   string       `json:"metric"`
	Capacity *int64       `json:"capacity"`
	Labels   []string     `json:"labels"`
	Series   []seriesJSON `json:"series"`
}

type seriesJSON struct {
	Model  string   `json:"model"`
	Values []*int64 `json:"values"`
	Limit  *int64   `json:"limit"`
}

type shareJSON struct {
	Metric   string     `json:"metric"`
	Capacity *int64     `json:"capacity"`
	Parts    []partJSON `json:"parts"`
}

type partJSON struct {
	Model string `json:"model"`
	Value int64  `json:"value"`
}

type waiverJSON struct {
	budget.Waiver
	DaysLeft     int  `json:"days_left"`
	ExpiringSoon bool `json:"expiring_soon"`
	Expired      bool `json:"expired"`
}

type changeJSON struct {
	Path   string      `json:"path"`
	Change string      `json:"change"`
	Deltas []deltaJSON `json:"deltas"`
}

type deltaJSON struct {
	Metric string `json:"metric"`
	Old    int64  `json:"old"`
	New    int64  `json:"new"`
}

type profileJSON struct {
	Path      string  `json:"path"`
	LiveBytes []int64 `json:"live_bytes"`
	PeakStep  int     `json:"peak_step"`
}

type releaseJSON struct {
	Tag     string        `json:"tag"`
	Commit  string        `json:"commit"`
	Date    time.Time     `json:"date"`
	Verdict budget.Status `json:"verdict,omitempty"`
	Models  int           `json:"models"`
	Error   string        `json:"error,omitempty"`
}

// SignoffJSON writes the release sign-off report as loadline.signoff/v1.
func SignoffJSON(w io.Writer, s *budget.Signoff, opt SignoffOptions) error {
	v := newSignoffView(s)
	out := signoffJSON{
		Schema: SignoffSchema, Revision: s.Revision, Date: s.Date, BudgetFile: s.BudgetFile, BudgetBlob: s.BudgetBlob,
		AnalyzerVersion: s.AnalyzerVersion, Tool: toolName(opt.Version), Verdict: v.verdict, Summary: signoffSummary(v),
		Missing: orEmpty(s.Missing), Devices: []deviceJSON{}, Waivers: []waiverJSON{},
		Unmeasured: deref(v.unmeasured), Unbudgeted: deref(v.unbudgeted), Unassigned: deref(v.unassigned),
		ChangesSince: v.previous, Changes: []changeJSON{}, Profiles: []profileJSON{}, Releases: []releaseJSON{},
		Problems: []budget.Finding{},
	}
	for _, d := range v.devices {
		dj := deviceJSON{DeviceCapacity: d.cap, Verdict: d.verdict, Models: deref(d.models), Totals: d.totals, Trends: []trendJSON{}, Shares: []shareJSON{}}
		for _, t := range d.trends {
			tj := trendJSON{Metric: t.metric, Capacity: t.capacity, Labels: v.labels, Series: []seriesJSON{}}
			for _, s := range t.series {
				tj.Series = append(tj.Series, seriesJSON{Model: s.model, Values: s.values, Limit: s.limit})
			}
			dj.Trends = append(dj.Trends, tj)
		}
		for _, sh := range d.shares {
			sj := shareJSON{Metric: sh.metric, Capacity: sh.capacity, Parts: []partJSON{}}
			for _, p := range sh.parts {
				sj.Parts = append(sj.Parts, partJSON{p.model, p.value})
			}
			dj.Shares = append(dj.Shares, sj)
		}
		out.Devices = append(out.Devices, dj)
	}
	for _, wv := range v.waivers {
		out.Waivers = append(out.Waivers, waiverJSON{Waiver: wv.w, DaysLeft: wv.days, ExpiringSoon: wv.soon, Expired: wv.days < 0})
	}
	for _, c := range v.changes {
		cj := changeJSON{Path: c.path, Change: c.kind, Deltas: []deltaJSON{}}
		for _, d := range c.deltas {
			cj.Deltas = append(cj.Deltas, deltaJSON{d.metric, d.old, d.new})
		}
		out.Changes = append(out.Changes, cj)
	}
	for _, m := range v.profiles {
		out.Profiles = append(out.Profiles, profileJSON{Path: m.Path, LiveBytes: m.Detail.LiveBytes, PeakStep: m.Detail.PeakStep})
	}
	for _, r := range s.Releases {
		rj := releaseJSON{Tag: r.Tag, Commit: r.Commit, Date: r.Date, Error: r.Error}
		if r.Result != nil && r.Error == "" {
			rj.Verdict, rj.Models = verdict(r.Result), len(r.Result.Models)
		}
		out.Releases = append(out.Releases, rj)
	}
	if s.Current != nil && len(s.Current.Findings) > 0 {
		out.Problems = s.Current.Findings
	}
	return writeJSON(w, out, true)
}

// deref copies models into a list, never null, as the JSON contracts have
// lists.
func deref(ms []*budget.ModelResult) []budget.ModelResult {
	out := make([]budget.ModelResult, 0, len(ms))
	for _, m := range ms {
		out = append(out, *m)
	}
	return out
}

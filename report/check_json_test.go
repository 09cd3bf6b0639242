package report

import (
	"bytes"
	"encoding/json"
	"testing"

	"github.com/loadline/loadline/budget"
)

// TestCheckJSONContract reads the mixed fixture's document as an untyped
// consumer would and checks the keys of the loadline.check/v1 document that
// the README's `--format json` names and CheckJSON's doc comment lists.
func TestCheckJSONContract(t *testing.T) {
	var b bytes.Buffer
	if err := CheckJSON(&b, mixed().r); err != nil {
		t.Fatal(err)
	}
	var doc map[string]any
	if err := json.Unmarshal(b.Bytes(), &doc); err != nil {
		t.Fatal(err)
	}
	if doc["schema"] != "loadline.check/v1" {
		t.Errorf("schema %v", doc["schema"])
	}
	for _, side := range []string{"base", "head"} {
		rev, ok := doc[side].(map[string]any)
		if !ok || rev["ref"] == "" || rev["commit"] == "" {
			t.Errorf("%s: %v", side, doc[side])
		}
	}
	if doc["verdict"] != "fail" {
		t.Errorf("verdict %v", doc["verdict"])
	}
	for _, list := range []string{"models", "budget_changes", "waivers", "problems", "findings"} {
		if _, ok := doc[list].([]any); !ok {
			t.Errorf("%s is %T, want a list", list, doc[list])
		}
	}
	byPath := map[string]map[string]any{}
	for _, m := range doc["models"].([]any) {
		m := m.(map[string]any)
		byPath[m["path"].(string)] = m
		for _, key := range []string{"path", "change", "base", "head", "checks"} {
			if _, ok := m[key]; !ok {
				t.Errorf("%s: no %q", m["path"], key)
			}
		}
		if _, ok := m["checks"].([]any); !ok {
			t.Errorf("%s: checks is %T, want a list", m["path"], m["checks"])
		}
		for _, c := range m["checks"].([]any) {
			c := c.(map[string]any)
			for _, key := range []string{"metric", "value", "base", "limit", "status", "reason"} {
				if _, ok := c[key]; !ok {
					t.Errorf("%s %v: no %q", m["path"], c["metric"], key)
				}
			}
			switch c["status"] {
			case "pass", "warn", "fail", "waived":
			default:
				t.Errorf("%s %v: status %v", m["path"], c["metric"], c["status"])
			}
		}
	}
	if m := byPath["models/kitchen/wakeword.onnx"]; m["change"] != "added" || m["base"] != nil {
		t.Errorf("added model: change %v, base %v; want added, null", m["change"], m["base"])
	}
	if m := byPath["models/birdcam/legacy.onnx"]; m["change"] != "removed" || m["head"] != nil {
		t.Errorf("removed model: change %v, head %v; want removed, null", m["change"], m["head"])
	}
	// {figures} has the keys of a loadline.measure/v1 entry plus ram and flash.
	head := byPath["models/birdcam/detector.onnx"]["head"].(map[string]any)
	for _, key := range []string{"file_bytes", "params", "param_bytes", "macs", "flops", "memory", "ram", "flash"} {
		if _, ok := head[key]; !ok {
			t.Errorf("figures have no %q", key)
		}
	}
	// A model no rule matches has no device: its ram and flash are listed
	// as unknown with the reason, so that the 0 beside them is not read as a
	// figure.
	stray := byPath["models/experiments/tiny.onnx"]["head"].(map[string]any)
	if u, ok := stray["unknown"].(map[string]any); !ok || u["ram"] != "no rule names a device for this model" || u["flash"] != u["ram"] {
		t.Errorf("unbudgeted model: unknown %v; want ram and flash with the reason", stray["unknown"])
	}
	mem := head["memory"].(map[string]any)
	if d := mem["deployed"].(map[string]any); d["arena_bytes"] != float64(509952) {
		t.Errorf("memory.deployed.arena_bytes %v", d["arena_bytes"])
	}

	// Round trip: the document decodes back into the result it came from.
	var back struct {
		Schema string `json:"schema"`
		budget.Result
	}
	if err := json.Unmarshal(b.Bytes(), &back); err != nil {
		t.Fatal(err)
	}
	if len(back.Models) != len(mixed().r.Models) || back.Models[2].Checks[0].Status != budget.Fail {
		t.Errorf("round trip lost models or statuses: %+v", back.Models)
	}
}

// TestCheckJSONEmpty: an empty result still has every list, as [].
func TestCheckJSONEmpty(t *testing.T) {
	var b bytes.Buffer
	if err := CheckJSON(&b, &budget.Result{}); err != nil {
		t.Fatal(err)
	}
	want := `{
  "schema": "loadline.check/v1",
  "base": {
    "ref": "",
    "commit": ""
  },
  "head": {
    "ref": "",
    "commit": ""
  },
  "verdict": "pass",
  "models": [],
  "budget_changes": [],
  "waivers": [],
  "problems": [],
  "devices": [],
  "findings": []
}
`
	if b.String() != want {
		t.Errorf("got\n%s\nwant\n%s", b.String(), want)
	}
}

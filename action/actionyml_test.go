package action

import (
	"os"
	"regexp"
	"strings"
	"testing"

	"go.yaml.in/yaml/v3"
)

// TestActionYML checks action.yml against the composite-action metadata
// syntax GitHub documents: the inputs the README promises, every
// ${{ inputs.X }} naming a declared input, the build from the action's own
// source, the check command with its flags, and no input spliced into a
// script's text.
func TestActionYML(t *testing.T) {
	data, err := os.ReadFile("action.yml")
	if err != nil {
		t.Fatal(err)
	}
	var meta struct {
		Name   string `yaml:"name"`
		Inputs map[string]struct {
			Description string  `yaml:"description"`
			Default     *string `yaml:"default"`
		} `yaml:"inputs"`
		Outputs map[string]struct {
			Value string `yaml:"value"`
		} `yaml:"outputs"`
		Runs struct {
			Using string `yaml:"using"`
			Steps []struct {
				ID               string            `yaml:"id"`
				Shell            string            `yaml:"shell"`
				WorkingDirectory string            `yaml:"working-directory"`
				Run              string            `yaml:"run"`
				Env              map[string]string `yaml:"env"`
			} `yaml:"steps"`
		} `yaml:"runs"`
	}
	if err := yaml.Unmarshal(data, &meta); err != nil {
		t.Fatal(err)
	}
	if meta.Name == "" || meta.Runs.Using != "composite" || len(meta.Runs.Steps) != 2 {
		t.Fatalf("not a two-step composite action: %+v", meta.Runs)
	}
	for _, in := range []string{"budget", "base", "comment", "fail-on", "commit-status", "token"} {
		if i, ok := meta.Inputs[in]; !ok || i.Description == "" || i.Default == nil {
			t.Errorf("input %q missing, undescribed or without a default", in)
		}
	}
	for _, ref := range regexp.MustCompile(`\$\{\{\s*inputs\.([\w-]+)\s*\}\}`).FindAllStringSubmatch(string(data), -1) {
		if _, ok := meta.Inputs[ref[1]]; !ok {
			t.Errorf("${{ inputs.%s }} names no declared input", ref[1])
		}
	}
	build, check := meta.Runs.Steps[0], meta.Runs.Steps[1]
	if build.WorkingDirectory != "${{ github.action_path }}/.." || strings.TrimSpace(build.Run) != `go build -o "$RUNNER_TEMP/loadline" ./cmd/loadline` {
		t.Errorf("build step %+v", build)
	}
	for _, want := range []string{`"$RUNNER_TEMP/loadline"`, "check --post --format markdown", `--budget "$LOADLINE_BUDGET"`, `--fail-on "$LOADLINE_FAIL_ON"`, `--base "$LOADLINE_BASE"`} {
		if !strings.Contains(check.Run, want) {
			t.Errorf("check step does not run %s", want)
		}
	}
	if check.Env["GITHUB_TOKEN"] != "${{ inputs.token }}" || check.Env["LOADLINE_COMMENT"] != "${{ inputs.comment }}" {
		t.Errorf("check step env %v", check.Env)
	}
	for _, st := range meta.Runs.Steps {
		if st.Shell != "bash" {
			t.Errorf("step %q: composite run steps need shell: bash", st.ID)
		}
		if strings.Contains(st.Run, "${{") {
			t.Errorf("step %q splices an expression into its script", st.ID)
		}
	}
	for name, o := range meta.Outputs {
		if !strings.Contains(o.Value, "steps.check.outputs."+name) {
			t.Errorf("output %s = %q", name, o.Value)
		}
	}
}

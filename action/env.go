package action

import (
	"encoding/json"
	"fmt"
	"os"
	"strconv"
	"strings"

	"github.com/loadline/loadline/internal/regular"
)

// GitHubEnv is what a GitHub Actions job tells a step about itself, read
// from the variables the platform documents ("Store information in
// variables", default environment variables) and the event payload file.
type GitHubEnv struct {
	Repository string // GITHUB_REPOSITORY, "owner/name"
	APIURL     string // GITHUB_API_URL; https://HOST/api/v3 on GitHub Enterprise Server
	ServerURL  string // GITHUB_SERVER_URL, for links to the run
	RunID      string // GITHUB_RUN_ID
	Token      string // GITHUB_TOKEN (the action passes the job's token under this name)
	EventName  string // GITHUB_EVENT_NAME
	EventPath  string // GITHUB_EVENT_PATH
	SHA        string // GITHUB_SHA: on a pull request, the merge commit
	// StepSummary is GITHUB_STEP_SUMMARY, the job summary file; Output is
	// GITHUB_OUTPUT, the step outputs file.
	StepSummary string
	Output      string

	// From the event payload's pull_request, when the event has one.
	PullNumber int    // pull_request.number; 0 when the event is not a pull request
	HeadSHA    string // pull_request.head.sha: the commit a status belongs on
	BaseRef    string // pull_request.base.ref: the target branch
	BaseSHA    string // pull_request.base.sha
	HeadRepo   string // pull_request.head.repo.full_name
	BaseRepo   string // pull_request.base.repo.full_name
}

// Fork says whether the pull request comes from another repository than
// the one it targets; its token then cannot usually write.
func (e GitHubEnv) Fork() bool {
	return e.HeadRepo != "" && e.BaseRepo != "" && !strings.EqualFold(e.HeadRepo, e.BaseRepo)
}

// Owner and Repo split Repository.
func (e GitHubEnv) Owner() string { o, _, _ := strings.Cut(e.Repository, "/"); return o }

// Repo is the repository's name without its owner.
func (e GitHubEnv) Repo() string { _, r, _ := strings.Cut(e.Repository, "/"); return r }

// RunURL links to the workflow run, for a commit status; empty when the
// environment does not say.
func (e GitHubEnv) RunURL() string {
	if e.ServerURL == "" || e.Repository == "" || e.RunID == "" {
		return ""
	}
	return strings.TrimRight(e.ServerURL, "/") + "/" + e.Repository + "/actions/runs/" + e.RunID
}

// maxEventPayload bounds the event payload file GitHubEnvFrom reads.
const maxEventPayload = 64 << 20

// GitHubEnvFrom reads the environment through getenv (os.Getenv in a
// job, a map in tests), and the event payload file it names. A missing
// payload file is no error (the step may not be in a pull request); an
// unreadable or malformed one is.
func GitHubEnvFrom(getenv func(string) string) (GitHubEnv, error) {
	e := GitHubEnv{
		Repository:  getenv("GITHUB_REPOSITORY"),
		APIURL:      getenv("GITHUB_API_URL"),
		ServerURL:   getenv("GITHUB_SERVER_URL"),
		RunID:       getenv("GITHUB_RUN_ID"),
		Token:       getenv("GITHUB_TOKEN"),
		EventName:   getenv("GITHUB_EVENT_NAME"),
		EventPath:   getenv("GITHUB_EVENT_PATH"),
		SHA:         getenv("GITHUB_SHA"),
		StepSummary: getenv("GITHUB_STEP_SUMMARY"),
		Output:      getenv("GITHUB_OUTPUT"),
	}
	if e.APIURL == "" {
		e.APIURL = "https://api.github.com"
	}
	if e.EventPath == "" {
		return e, nil
	}
	// GitHub caps a webhook payload at 25 MB (its webhook documentation,
	// from memory); the bound keeps a stray path (a device, a huge file)
	// from being read without end.
	data, err := regular.ReadFile(e.EventPath, maxEventPayload)
	if os.IsNotExist(err) {
		return e, nil
	}
	if err != nil {
		return e, fmt.Errorf("GitHub event payload: %w", err)
	}
	var ev struct {
		PullRequest *struct {
			Number int `json:"number"`
			Head   struct {
				SHA  string `json:"sha"`
				Repo *struct {
					FullName string `json:"full_name"`
				} `json:"repo"`
			} `json:"head"`
			Base struct {
				Ref  string `json:"ref"`
				SHA  string `json:"sha"`
				Repo *struct {
					FullName string `json:"full_name"`
				} `json:"repo"`
			} `json:"base"`
		} `json:"pull_request"`
	}
	if err := json.Unmarshal(data, &ev); err != nil {
		return e, fmt.Errorf("GitHub event payload %s: %w", e.EventPath, err)
	}
	if pr := ev.PullRequest; pr != nil {
		e.PullNumber = pr.Number
		e.HeadSHA = pr.Head.SHA
		e.BaseRef = pr.Base.Ref
		e.BaseSHA = pr.Base.SHA
		if pr.Head.Repo != nil {
			e.HeadRepo = pr.Head.Repo.FullName
		} else {
			// The head repository was deleted: it was a fork.
			e.HeadRepo = "(deleted fork)"
		}
		if pr.Base.Repo != nil {
			e.BaseRepo = pr.Base.Repo.FullName
		}
	}
	return e, nil
}

// GitLabEnv is what GitLab CI tells a merge-request pipeline job, from its
// predefined variables.
type GitLabEnv struct {
	APIURL    string // CI_API_V4_URL, e.g. https://gitlab.example.com/api/v4
	ProjectID string // CI_PROJECT_ID
	MRIID     int    // CI_MERGE_REQUEST_IID; 0 outside a merge-request pipeline
	// Token authenticates the notes API. A personal, project or group
	// access token (LOADLINE_GITLAB_TOKEN, else GITLAB_TOKEN) is sent as
	// PRIVATE-TOKEN; failing both, the job's CI_JOB_TOKEN is sent as
	// JOB-TOKEN, which GitLab may refuse for notes.
	Token       string
	TokenHeader string // "PRIVATE-TOKEN" or "JOB-TOKEN"

	// JobUser is GITLAB_USER_LOGIN, the user who started the job: the
	// author of what a job token writes.
	JobUser string

	TargetBranch string // CI_MERGE_REQUEST_TARGET_BRANCH_NAME
	DiffBaseSHA  string // CI_MERGE_REQUEST_DIFF_BASE_SHA: the merge-base the MR diff is taken from
	SourceSHA    string // CI_COMMIT_SHA
	// Fork is set when CI_MERGE_REQUEST_SOURCE_PROJECT_ID differs from
	// CI_MERGE_REQUEST_PROJECT_ID.
	Fork bool
}

// GitLabEnvFrom reads GitLab CI's variables through getenv.
func GitLabEnvFrom(getenv func(string) string) (GitLabEnv, error) {
	e := GitLabEnv{
		APIURL:       getenv("CI_API_V4_URL"),
		ProjectID:    getenv("CI_MERGE_REQUEST_PROJECT_ID"),
		TargetBranch: getenv("CI_MERGE_REQUEST_TARGET_BRANCH_NAME"),
		DiffBaseSHA:  getenv("CI_MERGE_REQUEST_DIFF_BASE_SHA"),
		SourceSHA:    getenv("CI_COMMIT_SHA"),
		JobUser:      getenv("GITLAB_USER_LOGIN"),
	}
	if e.ProjectID == "" {
		e.ProjectID = getenv("CI_PROJECT_ID")
	}
	if src := getenv("CI_MERGE_REQUEST_SOURCE_PROJECT_ID"); src != "" && src != e.ProjectID {
		e.Fork = true
	}
	for _, name := range []string{"LOADLINE_GITLAB_TOKEN", "GITLAB_TOKEN"} {
		if t := getenv(name); t != "" {
			e.Token, e.TokenHeader = t, "PRIVATE-TOKEN"
			break
		}
	}
	if e.Token == "" {
		if t := getenv("CI_JOB_TOKEN"); t != "" {
			e.Token, e.TokenHeader = t, "JOB-TOKEN"
		}
	}
	if v := getenv("CI_MERGE_REQUEST_IID"); v != "" {
		iid, err := strconv.Atoi(v)
		if err != nil || iid <= 0 {
			return e, fmt.Errorf("CI_MERGE_REQUEST_IID is %q, not a merge request number", v)
		}
		e.MRIID = iid
	}
	return e, nil
}

package main

import (
	"fmt"
	"os"
	"strings"
	"testing"

	"gopkg.in/yaml.v3"
)

// The shipped Kubernetes manifest parses as YAML and is an Indexed Job
// whose pods restore shard $JOB_COMPLETION_INDEX of N = completions into a
// directory on a volume every pod mounts. Source: Kubernetes Job API
// (batch/v1): spec.completionMode "Indexed" sets the JOB_COMPLETION_INDEX
// environment variable in each pod, from 0 to completions-1;
// backoffLimitPerIndex retries an index on its own.
func TestKubernetesManifest(t *testing.T) {
	b, err := os.ReadFile("../../deploy/kubernetes/limpid-shards-job.yaml")
	if err != nil {
		t.Fatal(err)
	}
	var job struct {
		APIVersion string `yaml:"apiVersion"`
		Kind       string `yaml:"kind"`
		Spec       struct {
			CompletionMode string `yaml:"completionMode"`
			Completions    int    `yaml:"completions"`
			Parallelism    int    `yaml:"parallelism"`
			Template       struct {
				Spec struct {
					RestartPolicy string `yaml:"restartPolicy"`
					Containers    []struct {
						Command      []string `yaml:"command"`
						Args         []string `yaml:"args"`
						VolumeMounts []struct {
							Name      string `yaml:"name"`
							MountPath string `yaml:"mountPath"`
						} `yaml:"volumeMounts"`
					} `yaml:"containers"`
					Volumes []struct {
						Name string         `yaml:"name"`
						PVC  map[string]any `yaml:"persistentVolumeClaim"`
					} `yaml:"volumes"`
				} `yaml:"spec"`
			} `yaml:"template"`
		} `yaml:"spec"`
	}
	if err := yaml.Unmarshal(b, &job); err != nil {
		t.Fatalf("the manifest is not YAML: %v", err)
	}
	s := job.Spec
	if job.APIVersion != "batch/v1" || job.Kind != "Job" || s.CompletionMode != "Indexed" || s.Completions < 1 || s.Parallelism < 1 {
		t.Fatalf("not an Indexed Job: apiVersion %q kind %q completionMode %q completions %d parallelism %d",
			job.APIVersion, job.Kind, s.CompletionMode, s.Completions, s.Parallelism)
	}
	if s.Template.Spec.RestartPolicy != "Never" && s.Template.Spec.RestartPolicy != "OnFailure" {
		t.Errorf("restartPolicy %q: a Job needs Never or OnFailure", s.Template.Spec.RestartPolicy)
	}
	if len(s.Template.Spec.Containers) != 1 {
		t.Fatalf("%d containers, want 1", len(s.Template.Spec.Containers))
	}
	c := s.Template.Spec.Containers[0]
	line := strings.Join(append(c.Command, c.Args...), " ")
	for _, want := range []string{"limpid restore", "--plan ", fmt.Sprintf("--shard \"${JOB_COMPLETION_INDEX}/%d\"", s.Completions)} {
		if !strings.Contains(line, want) {
			t.Errorf("the container's command %q lacks %q (the shard count must equal completions)", line, want)
		}
	}
	if len(c.VolumeMounts) == 0 || len(s.Template.Spec.Volumes) == 0 || c.VolumeMounts[0].Name != s.Template.Spec.Volumes[0].Name {
		t.Fatalf("no shared volume mounted: mounts %+v volumes %+v", c.VolumeMounts, s.Template.Spec.Volumes)
	}
	if mp := c.VolumeMounts[0].MountPath; !strings.Contains(line, mp+"/") {
		t.Errorf("the plan, input and DIR are not on the shared volume %s: %q", mp, line)
	}
}

// The shipped Slurm script refuses a wrong argument count (exit 2) and
// outside an array names what it needs; under Slurm it runs in
// TestScaleOutEngines. Source: bash(1) ${VAR:?word} (an unset variable
// ends a non-interactive shell with an error naming it).
func TestSlurmScriptArguments(t *testing.T) {
	const script = "../../deploy/slurm/limpid-shards.sbatch"
	out, err := runScript(script)
	if code := exitOf(err); code != 2 || !strings.Contains(out, "usage:") {
		t.Errorf("no arguments: exit %d, %q", code, out)
	}
	out, err = runScript(script, "p.json", "in.tif", "dir")
	if code := exitOf(err); code == 0 || !strings.Contains(out, "SLURM_ARRAY_TASK_ID") {
		t.Errorf("outside an array: exit %d, %q", code, out)
	}
}

package sweep

import (
	"fmt"
	"io"
	"os"
	"path/filepath"

	"go.yaml.in/yaml/v3"
	batchv1 "k8s.io/api/batch/v1"
	corev1 "k8s.io/api/core/v1"
	"k8s.io/apimachinery/pkg/api/resource"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	k8syaml "sigs.k8s.io/yaml"

	"stillsky/internal/atomicfile"
)

// ExitPointFailed is the exit status of `stillsky sweep --point` when the point's
// run failed (its result file holds the error): the Job's pod failure policy
// fails that index at once instead of retrying a run that would fail the same way.
const ExitPointFailed = 3

// Where the Job's pods find the spec and write the results.
const (
	SpecMount    = "/etc/stillsky/sweep"
	ResultsMount = "/results"
	specFile     = "sweep.yaml"
	scenarioFile = "scenario.yaml"
)

// KubeOptions set the Job's image, place and resources. Zero values take the
// defaults given beside each field.
type KubeOptions struct {
	// Image of the stillsky binary (default localhost/stillsky:latest, built
	// from deploy/Containerfile).
	Image string
	// Namespace of the Job and ConfigMap (default stillsky).
	Namespace string
	// ResultsClaim is the PersistentVolumeClaim the pods write results to
	// (default stillsky-sweep-results); with pods on several nodes it must be
	// ReadWriteMany.
	ResultsClaim string
	// Parallelism is the number of points run at once (default min(points, 8)).
	Parallelism int
	// CPU and Memory of each pod, requested and limited alike (Guaranteed QoS);
	// defaults 2 and 1Gi: the bench and the loop each keep a CPU busy in lockstep.
	CPU, Memory string
}

// Manifests returns the ConfigMap holding the spec and the Indexed Job running
// one point per completion, as built for the Kubernetes API.
func Manifests(s *Spec, o KubeOptions) (*corev1.ConfigMap, *batchv1.Job, error) {
	if o.Image == "" {
		o.Image = "localhost/stillsky:latest"
	}
	if o.Namespace == "" {
		o.Namespace = "stillsky"
	}
	if o.ResultsClaim == "" {
		o.ResultsClaim = "stillsky-sweep-results"
	}
	if o.Parallelism == 0 {
		o.Parallelism = min(len(s.Points), 8)
	}
	if o.Parallelism < 1 {
		return nil, nil, fmt.Errorf("sweep: parallelism %d: must be >= 1", o.Parallelism)
	}
	if o.CPU == "" {
		o.CPU = "2"
	}
	if o.Memory == "" {
		o.Memory = "1Gi"
	}
	cpu, err := resource.ParseQuantity(o.CPU)
	if err != nil {
		return nil, nil, fmt.Errorf("sweep: cpu %q: %w", o.CPU, err)
	}
	mem, err := resource.ParseQuantity(o.Memory)
	if err != nil {
		return nil, nil, fmt.Errorf("sweep: memory %q: %w", o.Memory, err)
	}
	if cpu.Sign() <= 0 || mem.Sign() <= 0 {
		return nil, nil, fmt.Errorf("sweep: cpu %s and memory %s must be positive", o.CPU, o.Memory)
	}
	spec, err := s.selfContained()
	if err != nil {
		return nil, nil, err
	}
	name := "sweep-" + s.Name
	labels := map[string]string{
		"app.kubernetes.io/name":     "stillsky-sweep",
		"app.kubernetes.io/part-of":  "stillsky",
		"app.kubernetes.io/instance": name,
	}
	meta := metav1.ObjectMeta{Name: name, Namespace: o.Namespace, Labels: labels}
	cm := &corev1.ConfigMap{
		TypeMeta:   metav1.TypeMeta{APIVersion: "v1", Kind: "ConfigMap"},
		ObjectMeta: meta,
		Data:       map[string]string{specFile: string(spec), scenarioFile: string(s.BaseScenario)},
	}
	n := int32(len(s.Points))
	indexed := batchv1.IndexedCompletion
	resources := corev1.ResourceList{corev1.ResourceCPU: cpu, corev1.ResourceMemory: mem}
	yes, no := true, false
	uid := int64(65532)
	job := &batchv1.Job{
		TypeMeta:   metav1.TypeMeta{APIVersion: "batch/v1", Kind: "Job"},
		ObjectMeta: meta,
		Spec: batchv1.JobSpec{
			CompletionMode: &indexed,
			Completions:    &n,
			Parallelism:    ptr(int32(min(o.Parallelism, len(s.Points)))),
			// One retry per point for a lost node or an evicted pod; a point's
			// own failure (ExitPointFailed) is not retried, and the other points
			// go on.
			BackoffLimitPerIndex: ptr(int32(1)),
			MaxFailedIndexes:     &n,
			PodFailurePolicy: &batchv1.PodFailurePolicy{Rules: []batchv1.PodFailurePolicyRule{
				{
					Action: batchv1.PodFailurePolicyActionFailIndex,
					OnExitCodes: &batchv1.PodFailurePolicyOnExitCodesRequirement{
						ContainerName: ptr("point"),
						Operator:      batchv1.PodFailurePolicyOnExitCodesOpIn,
						Values:        []int32{ExitPointFailed},
					},
				},
				{
					Action:          batchv1.PodFailurePolicyActionIgnore,
					OnPodConditions: []batchv1.PodFailurePolicyOnPodConditionsPattern{{Type: corev1.DisruptionTarget, Status: corev1.ConditionTrue}},
				},
			}},
			Template: corev1.PodTemplateSpec{
				ObjectMeta: metav1.ObjectMeta{Labels: labels},
				Spec: corev1.PodSpec{
					RestartPolicy: corev1.RestartPolicyNever,
					SecurityContext: &corev1.PodSecurityContext{
						RunAsNonRoot: &yes, RunAsUser: &uid, RunAsGroup: &uid, FSGroup: &uid,
						SeccompProfile: &corev1.SeccompProfile{Type: corev1.SeccompProfileTypeRuntimeDefault},
					},
					Containers: []corev1.Container{{
						Name:            "point",
						Image:           o.Image,
						ImagePullPolicy: corev1.PullIfNotPresent,
						// The Job controller sets JOB_COMPLETION_INDEX in every pod. No
						// GOMAXPROCS: the bench and the loop share the process, which
						// then takes more processors than cores (see `stillsky sweep`).
						Args: []string{"sweep", "--point-from-env", "--out", ResultsMount + "/" + s.Name, SpecMount + "/" + specFile},
						Resources: corev1.ResourceRequirements{
							Requests: resources,
							Limits:   resources.DeepCopy(),
						},
						VolumeMounts: []corev1.VolumeMount{
							{Name: "spec", MountPath: SpecMount, ReadOnly: true},
							{Name: "results", MountPath: ResultsMount},
							{Name: "tmp", MountPath: "/tmp"},
						},
						SecurityContext: &corev1.SecurityContext{
							AllowPrivilegeEscalation: &no,
							ReadOnlyRootFilesystem:   &yes,
							Capabilities:             &corev1.Capabilities{Drop: []corev1.Capability{"ALL"}},
						},
					}},
					Volumes: []corev1.Volume{
						{Name: "spec", VolumeSource: corev1.VolumeSource{ConfigMap: &corev1.ConfigMapVolumeSource{
							LocalObjectReference: corev1.LocalObjectReference{Name: name}}}},
						{Name: "results", VolumeSource: corev1.VolumeSource{PersistentVolumeClaim: &corev1.PersistentVolumeClaimVolumeSource{
							ClaimName: o.ResultsClaim}}},
						// The point's scenario file goes here (the root is read-only).
						{Name: "tmp", VolumeSource: corev1.VolumeSource{EmptyDir: &corev1.EmptyDirVolumeSource{}}},
					},
				},
			},
		},
	}
	return cm, job, nil
}

func ptr[T any](v T) *T { return &v }

// WriteManifests writes configmap.yaml and job.yaml into dir (for `kubectl apply
// -f dir`) and returns their paths.
func WriteManifests(s *Spec, o KubeOptions, dir string) ([]string, error) {
	cm, job, err := Manifests(s, o)
	if err != nil {
		return nil, err
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, err
	}
	var paths []string
	for _, f := range []struct {
		name, head string
		obj        any
	}{
		{"configmap.yaml", "# The spec of sweep " + s.Name + " and its scenario, for the Job beside it.\n", cm},
		{"job.yaml", fmt.Sprintf("# Sweep %s: %d points, one per completion index (written by stillsky sweep --kubernetes).\n# Results go to %s/%s on claim %s; merge them with `stillsky sweep collect`.\n",
			s.Name, len(s.Points), ResultsMount, s.Name, job.Spec.Template.Spec.Volumes[1].PersistentVolumeClaim.ClaimName), job},
	} {
		b, err := k8syaml.Marshal(f.obj)
		if err != nil {
			return nil, err
		}
		path := filepath.Join(dir, f.name)
		if err := atomicfile.Write(path, func(w io.Writer) error {
			_, err := w.Write(append([]byte(f.head), b...))
			return err
		}); err != nil {
			return nil, err
		}
		paths = append(paths, path)
	}
	return paths, nil
}

// selfContained returns the spec with its name written in and its scenario
// pointing at the scenario file beside it in the ConfigMap, so the pods need
// nothing but the ConfigMap and see exactly the points validated here.
func (s *Spec) selfContained() ([]byte, error) {
	var doc yaml.Node
	if err := yaml.Unmarshal(s.Source, &doc); err != nil {
		return nil, err
	}
	root := doc.Content[0]
	set := func(key, value string) {
		for i := 0; i+1 < len(root.Content); i += 2 {
			if root.Content[i].Value == key {
				root.Content[i+1] = &yaml.Node{Kind: yaml.ScalarNode, Tag: "!!str", Value: value}
				return
			}
		}
		root.Content = append([]*yaml.Node{
			{Kind: yaml.ScalarNode, Tag: "!!str", Value: key},
			{Kind: yaml.ScalarNode, Tag: "!!str", Value: value},
		}, root.Content...)
	}
	set("scenario", scenarioFile)
	set("name", s.Name)
	return yaml.Marshal(&doc)
}

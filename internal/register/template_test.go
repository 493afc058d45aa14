package register

import (
	"context"
	"errors"
	"strings"
	"testing"

	"brightfold/internal/phantom"
	"brightfold/internal/volume"
)

// TestBuildTemplate builds a template from four different demo phantom
// heads (4 mm) and checks the purpose of a group template: the cases
// correlate better (mean NCC after affine alignment) with the built
// template than with the first case they started from.
func TestBuildTemplate(t *testing.T) {
	cases := heads4mm(t, 4)
	opts := Options{LevelsMM: []float64{8, 4}, MaxIterations: []int{30, 20}}
	tpl, err := BuildTemplate(context.Background(), len(cases), func(i int) (*volume.Volume, error) { return cases[i], nil },
		TemplateOptions{Registration: opts, Rounds: 1})
	if err != nil {
		t.Fatal(err)
	}
	meanNCC := func(ref *volume.Volume) float64 {
		var s float64
		for _, c := range cases[1:] {
			r, err := Register(context.Background(), ref, c, opts)
			if err != nil {
				t.Fatal(err)
			}
			s += r.Value
		}
		return s / float64(len(cases)-1)
	}
	built, first := meanNCC(tpl), meanNCC(cases[0])
	t.Logf("mean NCC of cases 2-4: %.4f to the built template, %.4f to case 1", built, first)
	if !(built > first) {
		t.Errorf("built template fits the cases no better (NCC %.4f) than case 1 (%.4f)", built, first)
	}
}

// TestBuildTemplateSkip: cases that cannot be loaded (the first among them)
// are left out when Skip says so, each asked about once, and the template
// is the average of the others; without Skip the first failure stops the
// build with its error.
func TestBuildTemplateSkip(t *testing.T) {
	good := heads4mm(t, 3)
	bad := errors.New("not a scan")
	// cases 0 and 2 fail; 1, 3 and 4 are the phantoms
	load := func(i int) (*volume.Volume, error) {
		switch i {
		case 0, 2:
			return nil, bad
		case 1:
			return good[0], nil
		}
		return good[i-2], nil
	}
	opts := Options{LevelsMM: []float64{8, 4}, MaxIterations: []int{20, 10}}
	asked := map[int]int{}
	tpl, err := BuildTemplate(context.Background(), 5, load, TemplateOptions{Registration: opts, Rounds: 1,
		Skip: func(i int, err error) bool { asked[i]++; return errors.Is(err, bad) }})
	if err != nil {
		t.Fatal(err)
	}
	if len(asked) != 2 || asked[0] != 1 || asked[2] != 1 {
		t.Errorf("Skip asked about %v, want cases 0 and 2 once each", asked)
	}
	if tpl.Dims != good[0].Dims || !strings.Contains(tpl.Meta.Description, "of 3 cases") {
		t.Errorf("template on %v (%q), want case 1's grid %v and 3 cases", tpl.Dims, tpl.Meta.Description, good[0].Dims)
	}
	if _, err := BuildTemplate(context.Background(), 5, load, TemplateOptions{Registration: opts}); !errors.Is(err, bad) {
		t.Errorf("without Skip: got %v, want the load error", err)
	}
}

// heads4mm renders the first n demo phantom heads of cohort seed 11 at 4 mm.
func heads4mm(t *testing.T, n int) []*volume.Volume {
	t.Helper()
	var out []*volume.Volume
	for i := 0; i < n; i++ {
		c, err := phantom.Generate(11, i, phantom.Options{VoxelMM: 4})
		if err != nil {
			t.Fatal(err)
		}
		out = append(out, c.Volume)
	}
	return out
}

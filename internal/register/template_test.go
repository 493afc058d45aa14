package register

import (
	"context"
	"testing"

	"brightfold/internal/phantom"
	"brightfold/internal/volume"
)

// TestBuildTemplate builds a template from four different demo phantom
// heads (4 mm) and checks the purpose of a group template: the cases
// correlate better (mean NCC after affine alignment) with the built
// template than with the first case they started from.
func TestBuildTemplate(t *testing.T) {
	var cases []*volume.Volume
	for i := 0; i < 4; i++ {
		c, err := phantom.Generate(11, i, phantom.Options{VoxelMM: 4})
		if err != nil {
			t.Fatal(err)
		}
		cases = append(cases, c.Volume)
	}
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

package viewer

import (
	"image/png"
	"os"
	"testing"

	"brightfold/volume"
)

// TestLookMontage writes a montage to $VIEWER_LOOK for looking at by eye.
func TestLookMontage(t *testing.T) {
	out := os.Getenv("VIEWER_LOOK")
	if out == "" {
		t.Skip("set VIEWER_LOOK=file.png to write a montage for inspection")
	}
	v := headPhantom(t, [3]int{80, 96, 30}, [3]float64{2, 2, 5})
	s, err := NewScene(v)
	if err != nil {
		t.Fatal(err)
	}
	rel, _ := volume.New(v.Dims, v.Affine)
	for k := 0; k < v.Dims[2]; k++ {
		for j := 0; j < v.Dims[1]; j++ {
			for i := 0; i < v.Dims[0]; i++ {
				p := v.Affine.Apply([3]float64{float64(i), float64(j), float64(k)})
				d := (p[0]-20)*(p[0]-20) + (p[1]-10)*(p[1]-10) + (p[2]-15)*(p[2]-15)
				d2 := (p[0]+25)*(p[0]+25) + (p[1]+20)*(p[1]+20) + (p[2]-5)*(p[2]-5)
				rel.Data[rel.Index(i, j, k)] = float32(2*expNeg(d/300) - 1.2*expNeg(d2/200))
			}
		}
	}
	om, err := NewOverlayMap(s, rel, "relevance (a.u.)")
	if err != nil {
		t.Fatal(err)
	}
	signed := os.Getenv("VIEWER_SIGNED") != ""
	img, err := Montage(s, MontageSpec{
		At: [3]float64{20, 10, 15}, Window: s.DefaultWindow(), Overlay: om,
		Style: OverlayStyle{Opacity: 0.6, Threshold: Threshold{Value: 80, Percentile: true}, Signed: signed},
		Title: []string{"HMRU-0001  T1-weighted phantom", "Relevance: integrated gradients"}, Crosshair: true,
	})
	if err != nil {
		t.Fatal(err)
	}
	f, _ := os.Create(out)
	defer f.Close()
	png.Encode(f, img)
}

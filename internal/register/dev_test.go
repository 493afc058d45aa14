package register

import (
	"context"
	"math/rand/v2"
	"testing"
	"time"
)

func TestDevOne(t *testing.T) {
	tpl := phantomCase(t, 2, "")
	src := phantomCase(t, 1.5, "")
	rng := rand.New(rand.NewPCG(1, 2))
	for trial := 0; trial < 3; trial++ {
		a := randomAffine(rng, [3]float64{})
		scan := moveScan(t, src.Volume, a, 2, [3]int{100, 112, 100})
		t0 := time.Now()
		res, err := Register(context.Background(), tpl.Volume, scan, Options{})
		if err != nil {
			t.Fatal(err)
		}
		mean, mx := displacement(tpl.Volume, headOf(tpl), res.Transform, a)
		t.Logf("%v mean %.3f max %.3f value %.4f stages %+v", time.Since(t0), mean, mx, res.Value, res.Stages)
	}
}

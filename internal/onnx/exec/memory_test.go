package exec

import (
	"errors"
	"runtime"
	"strings"
	"testing"

	"brightfold/internal/onnx"
)

// outerProductModel multiplies a [1, n] input by its transpose: an [n, n]
// output whose size only the run shows (broadcasting, ONNX Mul-14).
func outerProductModel(t *testing.T, n int) *Executor {
	t.Helper()
	b := NewBuilder("outer", 13)
	x := b.Input("x", 1, n)
	col := b.Node("Reshape", []string{x, b.Param("col_shape", onnx.FromInts([]int64{int64(n), 1}, 2))})
	b.Output(b.Mul(col, x), "y")
	return builtExecutor(t, b)
}

// chainModel adds its [1, n] input to itself k times: every value is small,
// all of them together are k·4n bytes.
func chainModel(t *testing.T, n, k int) *Executor {
	t.Helper()
	b := NewBuilder("chain", 13)
	x := b.Input("x", 1, n)
	v := x
	for i := 0; i < k; i++ {
		v = b.Add(v, x)
	}
	b.Output(v, "y")
	return builtExecutor(t, b)
}

// builtExecutor is the executor of b's model.
func builtExecutor(t *testing.T, b *Builder) *Executor {
	t.Helper()
	m, err := b.Model()
	if err != nil {
		t.Fatal(err)
	}
	e, err := NewExecutor(m)
	if err != nil {
		t.Fatal(err)
	}
	return e
}

// A tensor over the memory limit is refused before it is allocated, and so
// is a pass whose values together pass it; both errors name the limit and
// the variable that raises it, and the same runs pass under a raised limit.
func TestMemoryLimit(t *testing.T) {
	const n = 2048 // outer product: 4 Mi elements, 16 MiB plus 64 MiB of index tables
	outer := outerProductModel(t, n)
	chain := chainModel(t, 1<<20, 12) // 12 values of 4 MiB
	feed := map[string]*onnx.Tensor{"x": onnx.New(1, n)}
	chainFeed := map[string]*onnx.Tensor{"x": onnx.New(1, 1<<20)}

	t.Setenv(MemoryLimitEnv, "32")
	var before, after runtime.MemStats
	runtime.ReadMemStats(&before)
	_, err := outer.Forward(feed)
	runtime.ReadMemStats(&after)
	var me *MemoryError
	if !errors.As(err, &me) || me.Limit != 32<<20 || me.Bytes != n*n*20 {
		t.Fatalf("outer product under 32 MiB: %v, want a MemoryError of %d bytes", err, n*n*20)
	}
	if grew := after.TotalAlloc - before.TotalAlloc; grew > 1<<20 {
		t.Errorf("the refused run allocated %d bytes first", grew)
	}
	for _, want := range []string{"32 MiB", MemoryLimitEnv, "[2048 2048]"} {
		if !strings.Contains(err.Error(), want) {
			t.Errorf("message %q lacks %q", err, want)
		}
	}
	tr, err := chain.Forward(chainFeed)
	if !errors.As(err, &me) || !strings.Contains(err.Error(), "forward pass") || me.Bytes <= 32<<20 || me.Bytes > 36<<20 {
		t.Fatalf("a chain of 48 MiB under 32 MiB: %v %v, want the pass refused at its ninth value", tr, err)
	}

	t.Setenv(MemoryLimitEnv, "128")
	if _, err := outer.Forward(feed); err != nil {
		t.Fatalf("outer product under 128 MiB: %v", err)
	}
	tr, err = chain.Forward(chainFeed)
	if err != nil {
		t.Fatalf("chain under 128 MiB: %v", err)
	}
	t.Setenv(MemoryLimitEnv, "40")
	_, err = chain.Backward(tr, map[string]*onnx.Tensor{"y": onnx.New(1, 1<<20)})
	if !errors.As(err, &me) || !strings.Contains(err.Error(), "backward pass") {
		t.Fatalf("backward with 48 MiB of gradients under 40 MiB: %v", err)
	}
}

package nifti

import (
	"bufio"
	"fmt"
	"io"

	"github.com/klauspost/compress/gzip"
	"github.com/klauspost/pgzip"
)

// memberReader is a gzip reader that reads one member at a time
// (klauspost/compress/gzip or pgzip with Multistream(false)).
type memberReader interface {
	io.Reader
	Close() error
	Reset(io.Reader) error
	Multistream(bool)
}

// gzipMembers reads the concatenated members of a gzip file as one stream
// (RFC 1952 2.2, as gzip -d and nibabel do) and then decides what follows
// the last member: nothing, zero bytes (block padding, which gzip -t and
// nibabel accept), or anything else, which is refused as garbage.
type gzipMembers struct {
	src  *bufio.Reader // the compressed bytes; a ByteReader, so gzip reads no further than a member
	z    memberReader
	done bool
	err  error // sticky: a caller that got bytes with it may read again
}

// newGzipMembers starts reading src, which begins with the gzip magic bytes.
func newGzipMembers(src io.Reader, size int64) (*gzipMembers, error) {
	br, ok := src.(*bufio.Reader)
	if !ok {
		br = bufio.NewReaderSize(src, 1<<16)
	}
	var z memberReader
	var err error
	if size < 1<<20 {
		z, err = gzip.NewReader(br)
	} else {
		z, err = pgzip.NewReader(br)
	}
	if err != nil {
		return nil, err
	}
	z.Multistream(false)
	return &gzipMembers{src: br, z: z}, nil
}

// Read reads decompressed bytes across members.
func (g *gzipMembers) Read(p []byte) (int, error) {
	for {
		if g.err != nil {
			return 0, g.err
		}
		if g.done {
			return 0, io.EOF
		}
		n, err := g.z.Read(p)
		if err != io.EOF {
			g.err = err
			return n, err
		}
		if err := g.next(); err != nil {
			g.err = err
			return n, err
		}
		if n > 0 {
			return n, nil
		}
	}
}

// next looks at what follows a member: another member, zero padding, the end, or garbage.
func (g *gzipMembers) next() error {
	head, _ := g.src.Peek(2)
	switch {
	case len(head) == 0:
		g.done = true
		return nil
	case len(head) == 2 && head[0] == 0x1f && head[1] == 0x8b:
		return g.z.Reset(g.src)
	}
	n, nonzero, err := skipZeros(g.src)
	if err != nil {
		return err
	}
	if nonzero {
		return fmt.Errorf("garbage after the gzip data: a byte that is neither zero padding nor a new gzip member follows %d byte(s) of padding", n)
	}
	g.done = true
	return nil
}

// skipZeros reads src to its end, counting zero bytes, and stops at the first
// non-zero byte.
func skipZeros(src *bufio.Reader) (n int64, nonzero bool, err error) {
	buf := make([]byte, 64<<10)
	for {
		k, err := src.Read(buf)
		for _, c := range buf[:k] {
			if c != 0 {
				return n, true, nil
			}
		}
		n += int64(k)
		if err == io.EOF {
			return n, false, nil
		}
		if err != nil {
			return n, false, err
		}
	}
}

// Close closes the member reader.
func (g *gzipMembers) Close() error { return g.z.Close() }

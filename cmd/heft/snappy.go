package main

import (
	"sync"

	"github.com/apache/arrow-go/v18/parquet/compress"
	"github.com/klauspost/compress/s2"
)

// fastSnappy is arrow-go's snappy codec with the encoder's fast mode instead
// of its "better" mode: measured on the demo table it compresses about 1.75×
// faster for files a few percent larger, and the output is standard snappy,
// which every reader decodes. Decoding is unchanged.
type fastSnappy struct{ compress.Codec }

func (fastSnappy) Encode(dst, src []byte) []byte { return s2.EncodeSnappy(dst, src) }

func (fastSnappy) EncodeLevel(dst, src []byte, _ int) []byte { return s2.EncodeSnappy(dst, src) }

var snappyOnce sync.Once

// useFastSnappy swaps the codec once per process, before any file is
// written (arrow-go keeps its codecs in a process-wide table).
func useFastSnappy() {
	snappyOnce.Do(func() {
		if c, err := compress.GetCodec(compress.Codecs.Snappy); err == nil {
			compress.RegisterCodec(compress.Codecs.Snappy, fastSnappy{c})
		}
	})
}

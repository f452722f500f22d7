package store

import (
	"context"
	"fmt"
	"testing"

	"sluice/internal/testenv"
)

// A 64³ uint16 tile chunk, the unit ingest writes and workers read.
const chunkBytes = 64 * 64 * 64 * 2

func benchPutGet(b *testing.B, s Store) {
	ctx := context.Background()
	data := make([]byte, chunkBytes)
	for i := range data {
		data[i] = byte(i * 7)
	}
	b.Run("Put", func(b *testing.B) {
		b.SetBytes(chunkBytes)
		for i := 0; i < b.N; i++ {
			if err := s.Put(ctx, fmt.Sprintf("bench/%d/0/0", i%64), data); err != nil {
				b.Fatal(err)
			}
		}
	})
	b.Run("Get", func(b *testing.B) {
		if err := s.Put(ctx, "bench/get", data); err != nil {
			b.Fatal(err)
		}
		b.SetBytes(chunkBytes)
		for i := 0; i < b.N; i++ {
			if _, err := s.Get(ctx, "bench/get"); err != nil {
				b.Fatal(err)
			}
		}
	})
}

func BenchmarkLocal(b *testing.B) {
	s, err := NewLocal(b.TempDir())
	if err != nil {
		b.Fatal(err)
	}
	benchPutGet(b, s)
}

func BenchmarkS3MinIO(b *testing.B) {
	m := testenv.StartMinIO(b)
	s, err := Open(context.Background(), m.URL("bench"), Credentials{Secret(m.AccessKey), Secret(m.SecretKey)})
	if err != nil {
		b.Fatal(err)
	}
	benchPutGet(b, s)
}

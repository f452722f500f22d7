//go:build tools

package deps

import (
	_ "github.com/klauspost/compress/zstd"
	_ "github.com/minio/minio-go/v7"
	_ "github.com/nats-io/nats-server/v2/server"
	_ "github.com/nats-io/nats.go"
	_ "github.com/prometheus/client_golang/prometheus"
	_ "golang.org/x/image/tiff"
	_ "gonum.org/v1/gonum/mat"
	_ "gonum.org/v1/plot"
	_ "google.golang.org/protobuf/proto"
	_ "gopkg.in/yaml.v3"
)

//go:build tools

// This file pins modules that the repository depends on before every package
// imports them directly; go mod tidy keeps them because of it.
package main

import (
	_ "github.com/eclipse/paho.mqtt.golang"
	_ "github.com/influxdata/influxdb-client-go/v2"
	_ "github.com/mochi-mqtt/server/v2"
	_ "github.com/prometheus/client_golang/prometheus"
	_ "github.com/prometheus/client_golang/prometheus/testutil"
	_ "github.com/schollz/progressbar/v3"
	_ "github.com/stretchr/testify/require"
	_ "go.etcd.io/bbolt"
	_ "go.yaml.in/yaml/v3"
	_ "golang.org/x/term"
	_ "pgregory.net/rapid"
)

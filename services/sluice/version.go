package main

// Version is the software version recorded with every result; release
// builds set it with -ldflags "-X main.Version=...".
var Version = "0.1.0-dev"

// Command pause is the real node's sandbox image: it holds a pod's
// namespaces until the kubelet stops the pod, and exits on the signal.
package main

import (
	"os"
	"os/signal"
	"syscall"
)

func main() {
	c := make(chan os.Signal, 1)
	signal.Notify(c, syscall.SIGTERM, syscall.SIGINT)
	<-c
}

// Command etcd is etcd's own server entry point, built here because the etcd
// module carries replace directives and cannot be installed with go install.
package main

import (
	"os"

	"go.etcd.io/etcd/server/v3/etcdmain"
)

func main() {
	etcdmain.Main(os.Args)
}

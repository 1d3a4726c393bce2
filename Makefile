# plumbline: make targets. `make help` lists them.

SHELL := /usr/bin/env bash
.SHELLFLAGS := -eu -o pipefail -c

ROOT := $(shell pwd)
BIN := $(ROOT)/bin
K8S_BIN := $(BIN)/k8s
IMG ?= plumbline:dev
# make test requires the tiers that need root (the image in containerd, the
# real node) where they can run: as root.
REQUIRE_ROOT_TIERS ?= $(shell [ "$$(id -u)" = 0 ] && echo 1)
# The version stamped into the image's binary and label.
VERSION ?= dev
CONTROLLER_GEN_VERSION := v0.23.0
CONTROLLER_GEN := $(BIN)/controller-gen-$(CONTROLLER_GEN_VERSION)
KUBECTL ?= kubectl
GO_PACKAGES := ./...
# How long each fuzz target runs in make test and make fuzz.
FUZZTIME ?= 3s
# How many seeds make chaos runs (make test runs 10).
CHAOS_SEEDS ?= 100
# A Prometheus built by hack/build-prometheus.sh, and a kubectl built by
# hack/build-controlplane.sh, are found after the PATH's.
export PATH := $(PATH):$(BIN)/prom:$(K8S_BIN)

.PHONY: help
help: ## List the targets.
	@awk 'BEGIN {FS = ":.*##"} /^[a-zA-Z_-]+:.*##/ {printf "  %-16s %s\n", $$1, $$2}' $(MAKEFILE_LIST)

##@ The two commands of the README

.PHONY: demo
demo: build controlplane simcluster prometheus ## Run the Larkspur demo on a simulated cluster on loopback (builds what it needs once).
	$(BIN)/plumbline demo --assets $(K8S_BIN) --crds config/crd/bases

.PHONY: test
test: controlplane simcluster prometheus kubectl node alerts ## Run every test tier that can run here (unit, API server, Prometheus, simulated cluster, the image in containerd, the real node), then each fuzz target briefly.
	KUBEBUILDER_ASSETS=$(K8S_BIN) PLUMBLINE_REQUIRE_ENVTEST=1 PLUMBLINE_REQUIRE_SIMCLUSTER=1 \
	  PLUMBLINE_REQUIRE_CONTAINERD=$(REQUIRE_ROOT_TIERS) PLUMBLINE_REQUIRE_NODE=$(REQUIRE_ROOT_TIERS) go test -count=1 -timeout 40m $(GO_PACKAGES)
	FUZZTIME=$(FUZZTIME) hack/fuzz.sh

.PHONY: demo-real
demo-real: controlplane prometheus kubectl node ## The same story with real containers on a real node on this machine (root; builds what it needs once).
	go run ./hack/demo-real --assets $(K8S_BIN)

.PHONY: e2e
e2e: controlplane prometheus kubectl node ## Run the end-to-end suite on this machine's real node (root), or on the cluster PLUMBLINE_E2E_KUBECONFIG names.
	KUBEBUILDER_ASSETS=$(K8S_BIN) PLUMBLINE_REQUIRE_NODE=$(REQUIRE_ROOT_TIERS) go test -count=1 -timeout 40m -v -run '^TestStory$$' ./test/e2e

##@ Development

.PHONY: alerts
alerts: prometheus ## Check the example alerting rules (config/prometheus) and run their promtool unit tests.
	promtool check rules config/prometheus/alerts.yaml
	promtool test rules config/prometheus/alerts_test.yaml

.PHONY: prometheus
prometheus: ## Make prometheus and promtool available: on the PATH, else Debian's package (as root), else built into bin/prom.
	@if command -v prometheus >/dev/null && command -v promtool >/dev/null; then exit 0; fi; \
	if [ -x $(BIN)/prom/prometheus ] && [ -x $(BIN)/prom/promtool ]; then exit 0; fi; \
	if [ "$$(id -u)" = 0 ] && command -v apt-get >/dev/null; then \
	  echo "installing Debian's prometheus package ..."; \
	  apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq prometheus >/dev/null; \
	else \
	  echo "prometheus is not on the PATH and Debian's package needs root: building it from the Go module proxy into bin/prom"; \
	  hack/build-prometheus.sh; \
	fi

.PHONY: chaos
chaos: controlplane prometheus ## Run the fault-injection test for CHAOS_SEEDS seeds (default 100) and print its figures.
	KUBEBUILDER_ASSETS=$(K8S_BIN) PLUMBLINE_REQUIRE_ENVTEST=1 PLUMBLINE_CHAOS_SEEDS=$(CHAOS_SEEDS) \
	  go test -count=1 -timeout 60m ./test/integration -run '^TestChaos$$' -v 2>&1 | \
	  grep -E '^(chaos:|    chaos_test.go:[0-9]+: seed|--- FAIL|FAIL|ok )|violation|differs'

.PHONY: fuzz
fuzz: ## Run every fuzz target for FUZZTIME (make fuzz FUZZTIME=5m for a longer hunt).
	FUZZTIME=$(FUZZTIME) hack/fuzz.sh

.PHONY: test-unit
test-unit: ## Run the pure-function tests only (no API server).
	go test -count=1 -short $(GO_PACKAGES)

.PHONY: bench
bench: controlplane prometheus ## Print the benchmarks' figures: evaluate on a million rows, DeLong, CSV, datacheck on 1M x 50, the trigger fleet.
	go test ./internal/tools/evaluate ./internal/tools/stats -run '^$$' -bench . -benchtime 1x
	go test ./internal/tools/datacheck -run '^$$' -bench . -benchtime 1x
	KUBEBUILDER_ASSETS=$(K8S_BIN) go test ./test/integration -run '^$$' -bench TriggerFleet -benchtime 5x

.PHONY: bench-fleet
FLEET_PROFILES ?= $(CURDIR)/bin/fleet-profiles
bench-fleet: controlplane prometheus ## A fleet on one manager: PLUMBLINE_FLEET_LINES lines (10,000), 3 triggers and 10 versions each; prints start-up, rest, detection-delay and 10x-clock figures and the tops of its CPU and heap profiles (30-40 min at 10,000).
	KUBEBUILDER_ASSETS=$(K8S_BIN) PLUMBLINE_FLEET_PROFILES=$(FLEET_PROFILES) go test ./test/integration -run '^$$' -bench '^BenchmarkFleetScale$$' -benchtime 1x -timeout 90m
	hack/fleet-profiles.sh $(FLEET_PROFILES)

.PHONY: false-alarms
false-alarms: ## Print the trigger false-alarm and detection-delay table of docs/retraining.md (about 2 minutes).
	go run ./hack/falsealarms

.PHONY: backtest-example
backtest-example: build ## Replay the sample line and three other policies over a synthetic Larkspur history; chart in .demo/.
	mkdir -p .demo
	go run ./hack/larkspur-history > .demo/history.csv
	go run ./hack/larkspur-history --staleness > .demo/batches.csv
	$(BIN)/plumbline backtest --history .demo/history.csv --target 0.80 \
	  --line config/samples/larkspur_v1alpha1_modelline.yaml --line-triggers auc-drop \
	  --schedule "0 3 1 * *" --trigger below=0.80,for=6h,every=15m --cusum k=0.004,h=0.1 \
	  --out .demo/backtest.json --chart .demo/backtest.svg
	$(BIN)/plumbline backtest staleness --history .demo/batches.csv --trained-at 2026-06-01T00:00:00Z \
	  --target 0.80 --margin 0.01 --chart .demo/staleness.svg

.PHONY: manifests
manifests: $(CONTROLLER_GEN) ## Generate the CRDs and RBAC from the markers.
	$(CONTROLLER_GEN) crd:allowDangerousTypes=true paths=./api/... output:crd:artifacts:config=config/crd/bases
	go run ./hack/crdtrim config/crd/bases/*.yaml
	$(CONTROLLER_GEN) rbac:roleName=plumbline-manager paths=./controllers/... output:rbac:artifacts:config=config/rbac

.PHONY: generate
generate: $(CONTROLLER_GEN) ## Generate the deepcopy code from the markers.
	$(CONTROLLER_GEN) object:headerFile=hack/boilerplate.go.txt paths=./api/...

.PHONY: verify-generated
verify-generated: manifests generate ## Fail when generated files differ from what is committed.
	@if ! git diff --quiet -- api config || [ -n "$$(git ls-files --others --exclude-standard -- api config)" ]; then \
	  echo "generated files are stale: run 'make manifests generate' and commit the result" >&2; \
	  git --no-pager diff --stat -- api config >&2; git ls-files --others --exclude-standard -- api config >&2; exit 1; fi

.PHONY: fmt
fmt: ## Format the Go code.
	gofmt -w $$(git ls-files '*.go')

.PHONY: verify-fmt
verify-fmt: ## Fail when a Go file is not gofmt-formatted.
	@out=$$(gofmt -l $$(git ls-files '*.go')); if [ -n "$$out" ]; then echo "not gofmt-formatted (run make fmt):" >&2; echo "$$out" >&2; exit 1; fi

.PHONY: vet
vet: ## Run go vet.
	go vet $(GO_PACKAGES)

.PHONY: verify-tidy
verify-tidy: ## Fail when go.mod or go.sum is not tidy.
	go mod tidy -diff
	cd hack/controlplane && go mod tidy -diff

.PHONY: verify
verify: verify-fmt vet verify-tidy verify-generated ## Every check CI runs besides the tests.

.PHONY: build
build: ## Build the plumbline binary into bin/, and bin/kubectl-plumbline (a link) for kubectl.
	go build -o $(BIN)/plumbline .
	ln -sf plumbline $(BIN)/kubectl-plumbline

.PHONY: image
image: ## Build the image archive bin/plumbline-image.tar (IMG, VERSION) without a container engine: ctr images import, kind load image-archive, docker load.
	CGO_ENABLED=0 go build -trimpath -ldflags "-s -w -X main.version=$(VERSION)" -o $(BIN)/plumbline-linux .
	go run ./hack/image --binary $(BIN)/plumbline-linux --name $(IMG) --version $(VERSION) --out $(BIN)/plumbline-image.tar

.PHONY: run
run: build ## Run the controller against the cluster of the current kubeconfig.
	$(BIN)/plumbline manager

.PHONY: controlplane
controlplane: ## Build kube-apiserver and etcd from the Go module proxy into bin/k8s (once).
	hack/build-controlplane.sh etcd kube-apiserver

.PHONY: containerd
containerd: ## Make containerd and runc available for the image test: the PATH's, else Debian's packages (as root); without root the test is skipped.
	@if command -v containerd >/dev/null && command -v ctr >/dev/null && command -v runc >/dev/null; then exit 0; fi; \
	if [ "$$(id -u)" = 0 ] && command -v apt-get >/dev/null; then \
	  echo "installing Debian's containerd and runc packages ..."; \
	  apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq containerd runc >/dev/null; \
	else echo "containerd and runc are not installed and need root to install: the image test will be skipped"; fi

.PHONY: node
node: controlplane containerd ## Make the real node tier runnable: the kubelet and kube-proxy built into bin/k8s (once, about 15 minutes fresh), Debian's CNI plugins and iptables (as root).
	@if [ "$$(id -u)" != 0 ]; then echo "the real node needs root: its tests will be skipped"; exit 0; fi; \
	if [ ! -x /usr/lib/cni/bridge ] || ! command -v iptables >/dev/null || ! command -v conntrack >/dev/null; then \
	  echo "installing Debian's containernetworking-plugins, iptables and conntrack packages ..."; \
	  apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq containernetworking-plugins iptables conntrack >/dev/null; fi; \
	hack/build-controlplane.sh kubelet kube-proxy

.PHONY: kubectl
kubectl: ## Make kubectl available: the PATH's, else built from the Go module proxy into bin/k8s (about a minute after controlplane).
	@if command -v kubectl >/dev/null; then exit 0; fi; hack/build-controlplane.sh kubectl

.PHONY: simcluster
simcluster: controlplane ## Build kube-controller-manager, kube-scheduler and kwok into bin/k8s (once) for the simulated cluster.
	hack/build-controlplane.sh kube-controller-manager kube-scheduler kwok

##@ Deployment

.PHONY: docker-build
docker-build: ## Build the controller image (needs a Docker engine).
	docker build -t $(IMG) .

.PHONY: install
install: ## Install the CRDs into the cluster of the current kubeconfig.
	$(KUBECTL) apply --server-side -k config/crd

.PHONY: uninstall
uninstall: ## Remove the CRDs (and every ModelLine and ModelVersion) from the cluster.
	$(KUBECTL) delete --ignore-not-found -k config/crd

.PHONY: deploy
deploy: ## Install the CRDs, RBAC and the manager Deployment (image $(IMG)).
	$(KUBECTL) kustomize config/default | sed 's|image: plumbline:dev|image: $(IMG)|' | $(KUBECTL) apply --server-side -f -

.PHONY: undeploy
undeploy: ## Remove everything deploy installed.
	$(KUBECTL) delete --ignore-not-found -k config/default

$(CONTROLLER_GEN):
	mkdir -p $(BIN)
	GOBIN=$(BIN) go install sigs.k8s.io/controller-tools/cmd/controller-gen@$(CONTROLLER_GEN_VERSION)
	mv $(BIN)/controller-gen $(CONTROLLER_GEN)

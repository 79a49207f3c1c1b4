"""Mutation run over controller/: how many small faults planted in the tick's code do the
controller tests see?

    python -m host_sim.mutation                  # the whole run, results in spinrail-out/mutation.json
    python -m host_sim.mutation --list           # the mutants only, counted by module and operator
    python -m host_sim.mutation --show KEY       # one mutant as a unified diff
    python -m host_sim.mutation --keys K1 K2 ... # re-run chosen mutants (after adding a test)

Method (docs/mutation.md): each scope module is parsed (ast), one small change is made per
mutant (operators below), the module is written back with ast.unparse into a private copy of
the repository, and the driving tests run against that copy in a forked child with pytest -x.
A mutant is killed when a test fails (or the run times out, or the module no longer imports),
and survives when every test passes. The unchanged modules, unparsed the same way, must pass
first (the null mutant): otherwise unparse itself changed something and the run stops.

Operators: arith (+ -, * //, << >>, & |, on binary and augmented operators), compare (boundary
< <=, and negation < >=), bool (and or, not removed), neg (unary minus removed), const
(integer n -> n + 1, and n -> 0), return (a computed return value -> 0), stmt (an assignment or
a call statement inside a function -> pass), branch (an if condition -> True, -> False).
Not mutated: strings, imports, decorators, docstrings.

The hypothesis profile "mutation" (registered below; the child loads this module with
-p host_sim.mutation and HYPOTHESIS_PROFILE=mutation) is the CI profile's settings with fewer
examples and no shrinking: a mutant needs one failing example, not the smallest one.

Works on a snapshot: the tests and controller/ are copied from the working tree once, at the
start, into a temporary folder per worker; the working tree is never written except the result
file. Progress goes to stderr; the result (every mutant with its status, and the survivors) is
written whole as JSON.
"""
import argparse
import ast
import copy
import difflib
import hashlib
import json
import os
import shutil
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

try:  # the profile for the forked pytest children (this module is their -p plugin)
    from hypothesis import HealthCheck, Phase, settings as _hsettings

    _hsettings.register_profile(
        "mutation", max_examples=int(os.environ.get("SPINRAIL_MUT_EXAMPLES", "30")),
        derandomize=True, deadline=None, database=None, print_blob=False,
        phases=[Phase.explicit, Phase.reuse, Phase.generate],
        suppress_health_check=[HealthCheck.too_slow])
except ImportError:  # pragma: no cover (hypothesis is a test dependency)
    pass

ROOT = Path(__file__).resolve().parents[1]
# the modules the tick runs, then the profile loader (load time, not tick time)
SCOPE = ("supervisor", "leadacid", "supercap", "usbport", "overvolt", "buckloop", "mppt",
         "signals", "compat")
SCOPE_PROFILE = ("profile", "profile_fields", "profile_battery", "profile_system")
# the property tests (hypothesis oracles ctl_props.py over ctl_scen.py); the rest are unit tests
PROPERTY_TESTS = ("test_properties.py", "test_stateful_charger.py")
EXCLUDED_TESTS = (
    # spawns the MicroPython interpreter per example and compares it with CPython running the
    # same (mutated) source: it can tell a mutant only by a crash, at seconds per example
    "test_dual_target.py",
    # tests the properties themselves (each finds a scenario that a hand-made fault fails);
    # at 7 s a run it would cost more than every other test together, for the same oracles
    "test_mutations.py",
)
OWN_TESTS = {"profile_fields": "test_profile.py", "profile_battery": "test_profile.py",
             "profile_system": "test_profile.py"}
EQUIV_PATH = ROOT / "host_sim" / "mutation_survivors.json"  # key -> written reason
DEFAULT_OUT = ROOT / "spinrail-out" / "mutation.json"

_ARITH = {ast.Add: ast.Sub, ast.Sub: ast.Add, ast.Mult: ast.FloorDiv, ast.FloorDiv: ast.Mult,
          ast.Div: ast.Mult, ast.Mod: ast.FloorDiv, ast.LShift: ast.RShift,
          ast.RShift: ast.LShift, ast.BitAnd: ast.BitOr, ast.BitOr: ast.BitAnd,
          ast.BitXor: ast.BitOr}
_BOUNDARY = {ast.Lt: ast.LtE, ast.LtE: ast.Lt, ast.Gt: ast.GtE, ast.GtE: ast.Gt}
_NEGATE = {ast.Lt: ast.GtE, ast.LtE: ast.Gt, ast.Gt: ast.LtE, ast.GtE: ast.Lt, ast.Eq: ast.NotEq,
           ast.NotEq: ast.Eq, ast.Is: ast.IsNot, ast.IsNot: ast.Is, ast.In: ast.NotIn,
           ast.NotIn: ast.In}


def _say(msg):
    sys.stderr.write(msg + "\n")
    sys.stderr.flush()


# --- mutants -------------------------------------------------------------------------------------
class _Context(ast.NodeVisitor):
    """For every node: its parent, the enclosing function's dotted name, and whether it may be
    mutated at all (not in a decorator, an import or a docstring)."""

    def __init__(self):
        self.parent = {}
        self.qual = {}
        self.frozen = set()
        self.in_func = set()
        self._stack = []
        self._func_depth = 0

    def generic_visit(self, node):
        for child in ast.iter_child_nodes(node):
            self.parent[id(child)] = node
        super().generic_visit(node)

    def visit(self, node):
        self.qual[id(node)] = ".".join(self._stack) or "<module>"
        if self._func_depth:
            self.in_func.add(id(node))
        return super().visit(node)

    def _scope(self, node, is_func):
        for d in node.decorator_list:
            for sub in ast.walk(d):
                self.frozen.add(id(sub))
        body = node.body
        if body and isinstance(body[0], ast.Expr) and isinstance(body[0].value, ast.Constant):
            for sub in ast.walk(body[0]):
                self.frozen.add(id(sub))
        self._stack.append(node.name)
        self._func_depth += is_func
        self.generic_visit(node)
        self._func_depth -= is_func
        self._stack.pop()

    def visit_FunctionDef(self, node):
        self._scope(node, 1)

    def visit_ClassDef(self, node):
        self._scope(node, 0)

    def visit_Import(self, node):
        self.frozen.add(id(node))

    visit_ImportFrom = visit_Import


def _src(node):
    return ast.unparse(node)


def _sites(tree):
    """Every possible mutation of one module's tree, as (walk index, operator, change, before,
    after, qualname, line). The change is replayed by _apply on a copy of the tree."""
    ctx = _Context()
    ctx.visit(tree)
    out = []
    for idx, node in enumerate(ast.walk(tree)):
        if id(node) in ctx.frozen:
            continue
        qual = ctx.qual.get(id(node), "<module>")
        line = getattr(node, "lineno", 0)

        def add(op, change, before, after):
            out.append((idx, op, change, before, after, qual, line))

        if isinstance(node, (ast.BinOp, ast.AugAssign)) and type(node.op) in _ARITH:
            new = _ARITH[type(node.op)]
            m = copy.deepcopy(node)
            m.op = new()
            add("arith", ("op", new), _src(node), _src(m))
        elif isinstance(node, ast.Compare):
            for k, o in enumerate(node.ops):
                for new in (_BOUNDARY.get(type(o)), _NEGATE.get(type(o))):
                    if new is None:
                        continue
                    m = copy.deepcopy(node)
                    m.ops[k] = new()
                    add("compare", ("cmp", k, new), _src(node), _src(m))
        elif isinstance(node, ast.BoolOp):
            new = ast.Or if isinstance(node.op, ast.And) else ast.And
            m = copy.deepcopy(node)
            m.op = new()
            add("bool", ("op", new), _src(node), _src(m))
        elif isinstance(node, ast.UnaryOp) and isinstance(node.op, (ast.Not, ast.USub)):
            add("bool" if isinstance(node.op, ast.Not) else "neg", ("unwrap",), _src(node),
                _src(node.operand))
        elif (isinstance(node, ast.Constant) and type(node.value) is int):
            for v in sorted({node.value + 1, 0} - {node.value}):
                add("const", ("const", v), repr(node.value), repr(v))
        elif (isinstance(node, ast.Return) and node.value is not None
              and not isinstance(node.value, ast.Constant)):
            add("return", ("return0",), _src(node), "return 0")
        if isinstance(node, ast.If):
            for v in (True, False):
                add("branch", ("test", v), "if " + _src(node.test), "if %s" % v)
        elif isinstance(node, ast.IfExp):
            for v in (True, False):
                m = copy.deepcopy(node)
                m.test = ast.Constant(v)
                add("branch", ("test", v), _src(node), _src(m))
        if (id(node) in ctx.in_func and isinstance(node, (ast.Assign, ast.AugAssign, ast.Expr))
                and not (isinstance(node, ast.Expr) and not isinstance(node.value, ast.Call))):
            add("stmt", ("pass",), _src(node).splitlines()[0], "pass")
    return out


def _apply(tree, idx, change):
    t = copy.deepcopy(tree)
    nodes = list(ast.walk(t))
    node = nodes[idx]
    kind = change[0]
    if kind == "op":
        node.op = change[1]()
    elif kind == "cmp":
        node.ops[change[1]] = change[2]()
    elif kind == "const":
        node.value = change[1]
    elif kind == "test":
        node.test = ast.Constant(change[1])
    elif kind in ("unwrap", "return0", "pass"):
        new = {"unwrap": lambda: node.operand,
               "return0": lambda: ast.Return(ast.Constant(0)),
               "pass": lambda: ast.Pass()}[kind]()
        for parent in nodes:
            for field, value in ast.iter_fields(parent):
                if value is node:
                    setattr(parent, field, new)
                    break
                if isinstance(value, list) and any(v is node for v in value):
                    value[[i for i, v in enumerate(value) if v is node][0]] = new
                    break
            else:
                continue
            break
    ast.fix_missing_locations(t)
    return ast.unparse(t) + "\n"


def enumerate_mutants(modules, controller_dir):
    """All mutants of the given modules: dicts with a stable key (module, function, operator,
    change and its occurrence within the function: no line numbers, so a key survives edits
    elsewhere in the file), the line, and the mutated module source. Mutants that give the
    same source as another (or as the original) are dropped."""
    mutants = []
    for mod in modules:
        path = controller_dir / (mod + ".py")
        orig = ast.parse(path.read_text(), str(path))
        null = ast.unparse(orig) + "\n"
        tree = ast.parse(null)  # the mutants' coordinates: lines of the unparsed text
        orig_nodes = list(ast.walk(orig))
        seen = {hashlib.sha1(null.encode()).hexdigest()}
        counts = {}
        nodes = list(ast.walk(tree))
        parents = {id(c): n for n in nodes for c in ast.iter_child_nodes(n)}
        assert [type(n) for n in nodes] == [type(n) for n in orig_nodes], mod
        for idx, op, change, before, after, qual, line in _sites(tree):
            text = _apply(tree, idx, change)
            h = hashlib.sha1(text.encode()).hexdigest()
            if h in seen:
                continue
            seen.add(h)
            base = "%s.py:%s:%s:%s -> %s" % (mod, qual, op, before, after)
            n = counts.get(base, 0)
            counts[base] = n + 1
            top = nodes[idx]
            while not isinstance(top, ast.stmt) and id(top) in parents:
                top = parents[id(top)]
            outer = parents.get(id(top))
            end = top.end_lineno
            if isinstance(top, (ast.If, ast.While)):
                end = top.test.end_lineno  # the header: the body's lines are its own mutants'
            elif isinstance(top, ast.For):
                end = top.iter.end_lineno
            mutants.append({"key": base + ("" if n == 0 else " #%d" % n), "module": mod,
                            "file": "controller/%s.py" % mod,
                            "line": getattr(orig_nodes[idx], "lineno", 0), "function": qual,
                            "operator": op, "original": before, "mutated": after,
                            "source": text,
                            # lines (unparsed) whose execution the mutant changes; None: module
                            # level, reached through any function that reads the name
                            "null_lines": (None if isinstance(outer, (ast.Module, ast.ClassDef))
                                           else list(range(top.lineno, end + 1)))})
    return mutants


# --- the run -------------------------------------------------------------------------------------
def driving_tests(tests_dir):
    """The driving test files in run order (pytest -x stops at the first failure)."""
    files = sorted(p.name for p in tests_dir.glob("test_*.py") if p.name not in EXCLUDED_TESTS)
    order = [f for f in PROPERTY_TESTS if f in files]
    return ["tests/controller/" + f for f in order + [f for f in files if f not in order]]


def importers(controller_dir):
    """module -> the controller modules that import names from it (they hold copies of its
    module-level values)."""
    out = {}
    for path in controller_dir.glob("*.py"):
        for node in ast.walk(ast.parse(path.read_text())):
            if isinstance(node, ast.ImportFrom) and (node.module or "").startswith("controller."):
                out.setdefault(node.module[11:], set()).add(path.stem)
    return out


# tests that read the modules' values themselves (repeated consts, slot names) and run no line
# of them: line coverage cannot see what they depend on
CONST_TESTS = ("tests/controller/test_compat.py",)


def select_tests(mu, coverage, users):
    """The tests (node ids, quickest first) that execute the mutated code on the unmutated
    controller: no other test can behave differently on the mutant. A module-level value
    reaches code through any function of its module or of a module that imported it, and
    through the tests that read it directly (CONST_TESTS)."""
    mod = mu["module"]
    if mu["null_lines"] is None:
        mods = {mod} | users.get(mod, set())
        sel = [t for t, cov in coverage.items() if any(cov["lines"].get(m) for m in mods)
               or t.startswith(CONST_TESTS)]
    else:
        want = set(mu["null_lines"])
        sel = [t for t, cov in coverage.items() if want.intersection(cov["lines"].get(mod, ()))]
    if not sel:  # run by no test, or only at import (a decorator's body): all of them
        sel = list(coverage)
    return sorted(sel, key=lambda t: coverage[t]["s"])  # quickest first: most kills are cheap


def make_snapshot(src, dest):
    """Copy what the tests need from the working tree (controller/, tests/, pyproject.toml),
    without bytecode caches: a stale .pyc of the same size and second must never be loaded."""
    dest.mkdir(parents=True)
    ignore = shutil.ignore_patterns("__pycache__", "*.pyc", ".hypothesis", "spinrail-out")
    shutil.copytree(src / "controller", dest / "controller", ignore=ignore)
    shutil.copytree(src / "tests", dest / "tests", ignore=ignore)
    shutil.copy2(src / "pyproject.toml", dest / "pyproject.toml")


def _write_whole(path, text):
    tmp = path.with_name("." + path.name + ".tmp")
    tmp.write_text(text)
    os.replace(tmp, path)


# --- the children's pytest plugin: line coverage per test, for the null run only --------------
_TRACE = {"dir": None, "hits": None, "out": {}}


def _trace_call(frame, event, arg):
    if frame.f_code.co_filename.startswith(_TRACE["dir"]):
        return _trace_line
    return None


def _trace_line(frame, event, arg):
    if event == "line":
        _TRACE["hits"].add((frame.f_code.co_filename, frame.f_lineno))
    return _trace_line


try:
    import pytest as _pytest

    @_pytest.hookimpl(hookwrapper=True)
    def pytest_runtest_protocol(item, nextitem):
        if not os.environ.get("SPINRAIL_MUT_TRACE"):
            yield
            return
        _TRACE["dir"] = os.path.join(os.getcwd(), "controller") + os.sep
        _TRACE["hits"] = hits = set()
        t0 = time.perf_counter()
        sys.settrace(_trace_call)
        try:
            yield
        finally:
            sys.settrace(None)
            lines = {}
            for fn, ln in hits:
                lines.setdefault(os.path.basename(fn)[:-3], []).append(ln)
            _TRACE["out"][item.nodeid] = {"s": round(time.perf_counter() - t0, 3),
                                          "lines": {m: sorted(v) for m, v in lines.items()}}

    def pytest_sessionfinish(session, exitstatus):
        out = os.environ.get("SPINRAIL_MUT_TRACE")
        if out:
            _write_whole(Path(out), json.dumps(_TRACE["out"]))
except ImportError:  # pragma: no cover
    pass


def _child(workdir, args, log_path, trace_path=None):
    """In the forked child: run pytest on workdir's copy; never returns."""
    try:
        fd = os.open(log_path, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o644)
        os.dup2(fd, 1)
        os.dup2(fd, 2)
        os.chdir(workdir)
        os.setpgid(0, 0)
        signal.signal(signal.SIGTERM, signal.SIG_DFL)
        signal.signal(signal.SIGINT, signal.SIG_DFL)
        sys.dont_write_bytecode = True
        os.environ["PYTHONDONTWRITEBYTECODE"] = "1"
        os.environ["HYPOTHESIS_PROFILE"] = "mutation"
        os.environ.pop("CI", None)
        if trace_path:
            os.environ["SPINRAIL_MUT_TRACE"] = trace_path
        root = str(ROOT)
        sys.path[:] = [str(workdir)] + [p for p in sys.path if p not in ("", root, ".")]
        for name in list(sys.modules):  # the snapshot's copies, never the working tree's
            if name == "controller" or name.startswith("controller."):
                del sys.modules[name]
        import pytest as _pt
        rc = _pt.main(["-x" if not trace_path else "-q", "-q", "-p", "no:cacheprovider",
                          "-p", "host_sim.mutation", "-o", "console_output_style=classic"]
                         + args)
        sys.stdout.flush()
        sys.stderr.flush()
        os._exit(int(rc))
    except BaseException:  # noqa: BLE001 (a child must never return into the parent's loop)
        import traceback
        traceback.print_exc()
        sys.stderr.flush()
        os._exit(99)


def _killer(log_text):
    for line in log_text.splitlines():
        if line.startswith(("FAILED ", "ERROR ")):
            return line.split(" - ")[0].split(" ", 1)[1]
    return None


class Pool:
    """Forked pytest children, one per worker folder, at most one each at a time."""

    def __init__(self, workdirs):
        self.workdirs = workdirs
        self.busy = {}  # pid -> (slot, job, started)
        self.free = list(range(len(workdirs)))
        self.dirty = {}  # slot -> (path, original text) to restore before the next job

    def start(self, job, files=None, trace_path=None):
        """Run job["args"] in a free worker folder after writing files ({path: text}) there."""
        slot = self.free.pop(0)
        wd = self.workdirs[slot]
        if slot in self.dirty:
            for rel, text in self.dirty.pop(slot).items():
                _write_whole(wd / rel, text)
        if files:
            self.dirty[slot] = {rel: (wd / rel).read_text() for rel in files}
            for rel, text in files.items():
                _write_whole(wd / rel, text)
        log = wd / "pytest.log"
        pid = os.fork()
        if pid == 0:
            _child(wd, job["args"], str(log), trace_path)
        self.busy[pid] = (slot, job, time.monotonic())

    def wait_one(self):
        """Wait for a child to end (killing it at its timeout); returns (job, rc, seconds,
        timed out, log text)."""
        while True:
            now = time.monotonic()
            for pid, (slot, job, t0) in list(self.busy.items()):
                if now - t0 > job["timeout_s"] and not job.get("killed"):
                    job["killed"] = True
                    try:
                        os.killpg(pid, signal.SIGKILL)
                    except ProcessLookupError:
                        pass
            pid, status = os.waitpid(-1, os.WNOHANG)
            if pid:
                slot, job, t0 = self.busy.pop(pid)
                self.free.append(slot)
                self.free.sort()
                text = (self.workdirs[slot] / "pytest.log").read_text(errors="replace")
                return (job, os.waitstatus_to_exitcode(status), time.monotonic() - t0,
                        bool(job.get("killed")), text)
            time.sleep(0.02)

    def stop_all(self):
        for pid in list(self.busy):
            try:
                os.killpg(pid, signal.SIGKILL)
                os.waitpid(pid, 0)
            except (ProcessLookupError, ChildProcessError):
                pass
        self.busy.clear()


def _git_state(src):
    def git(*a):
        r = subprocess.run(["git", "-C", str(src)] + list(a), capture_output=True, text=True)
        return r.stdout.strip() if r.returncode == 0 else None
    return git("rev-parse", "HEAD"), git("status", "--porcelain", "--", "controller", "tests")


def load_reasons():
    if EQUIV_PATH.exists():
        with open(EQUIV_PATH) as f:
            return json.load(f)
    return {}


def _on_term(signum, frame):
    raise KeyboardInterrupt


def run(args):
    modules = list(args.modules or (SCOPE + (SCOPE_PROFILE if args.profile else ())))
    for mod in modules:
        if not (Path(args.src) / "controller" / (mod + ".py")).exists():
            raise SystemExit("mutation: no module controller/%s.py (scope: %s)"
                             % (mod, ", ".join(SCOPE + SCOPE_PROFILE)))
    work = Path(tempfile.mkdtemp(prefix="spinrail-mut-"))
    signal.signal(signal.SIGTERM, _on_term)
    pool = None
    try:
        snap = work / "snapshot"
        make_snapshot(Path(args.src).resolve(), snap)
        mutants = enumerate_mutants(modules, snap / "controller")
        if args.keys:
            wanted = set(args.keys)
            mutants = [m for m in mutants if m["key"] in wanted]
            missing = wanted - {m["key"] for m in mutants}
            if missing:
                raise SystemExit("mutation: no such mutant key(s): %s" % "; ".join(sorted(missing)))
        if args.sample > 1:  # every k-th mutant of the list (it runs module by module)
            mutants = mutants[args.sample - 1::args.sample]
        if args.list or args.show:
            return _list(mutants, args)
        workdirs = []
        for i in range(args.jobs):
            shutil.copytree(snap, work / ("w%d" % i))
            workdirs.append(work / ("w%d" % i))
        pool = Pool(workdirs)
        return _run(args, modules, snap, mutants, pool)
    finally:
        if pool is not None:
            pool.stop_all()
        if not args.keep:
            shutil.rmtree(work, ignore_errors=True)


def _run(args, modules, snap, mutants, pool):
    t_start = time.monotonic()
    commit, dirty = _git_state(args.src)
    originals = {m: (snap / "controller" / (m + ".py")).read_text() for m in modules}
    tests_dir = snap / "tests" / "controller"
    files = driving_tests(tests_dir)
    _say("mutation: %d mutants over %s (snapshot of %s%s), %d workers"
         % (len(mutants), ", ".join(modules), (commit or "?")[:12],
            " + uncommitted changes" if dirty else "", args.jobs))

    # the null mutant: every scope module unparsed unchanged; every driving test must pass on
    # it. The same run records which lines of controller/ each test executes.
    trace_path = snap / "coverage.json"
    null = {"controller/%s.py" % m: ast.unparse(ast.parse(originals[m])) + "\n" for m in modules}
    pool.start({"args": files, "timeout_s": args.baseline_timeout}, null, str(trace_path))
    _, rc, base_s, _, text = pool.wait_one()
    if rc != 0:
        sys.stderr.write(text[-4000:])
        raise SystemExit("mutation: the tests fail on the unmutated (unparsed) controller "
                         "(pytest exit %d): fix that first" % rc)
    coverage = json.loads(trace_path.read_text())
    users = importers(snap / "controller")
    _say("mutation: null mutant passes (%d tests, %.1f s with line tracing)"
         % (len(coverage), base_s))

    results = []
    queue = []
    for mu in mutants:
        sel = select_tests(mu, coverage, users)
        if sel:
            t_s = sum(coverage[t]["s"] for t in sel)
            queue.append((mu, sel, max(args.min_timeout, args.timeout_factor * t_s)))
        else:  # no test runs this code: nothing can see the change
            results.append(_record(mu, "survived", None, 0.0, 0))
            _say("[-] survived  not run by any test: %s:%d %s: %s -> %s" % (
                mu["file"], mu["line"], mu["operator"], mu["original"], mu["mutated"]))
    total = len(queue)
    done = 0
    job_files = set()  # keys of mutants now run on whole test files
    while queue or pool.busy:
        while queue and pool.free:
            mu, sel, timeout_s = queue.pop(0)
            pool.start({"args": sel, "mutant": mu, "timeout_s": timeout_s, "n": len(sel),
                        "files": mu["key"] in job_files}, {mu["file"]: mu["source"]})
        job, rc, dt, timed_out, text = pool.wait_one()
        mu = job["mutant"]
        if rc in (4, 5) and not job.get("files"):
            # the mutant changed which tests exist (a module-level value a test is
            # parametrized over): the selected node ids are gone, run their whole files
            files = sorted({t.split("::")[0] for t in job["args"]})
            queue.insert(0, (mu, files, job["timeout_s"] * 2))
            job_files.add(mu["key"])
            continue
        if timed_out:
            status = "timeout"
        elif rc == 0:
            status = "survived"
        elif rc in (1, 2):  # a test failed, or collection failed (the module does not import)
            status = "killed"
        else:
            sys.stderr.write(text[-4000:])
            raise SystemExit("mutation: pytest exit %d on %s: the runner, not the mutant, "
                             "is wrong" % (rc, mu["key"]))
        killer = _killer(text) if status == "killed" else None
        results.append(_record(mu, status, killer, dt, job["n"]))
        done += 1
        _say("[%d/%d] %-8s %5.1fs %3d tests %s:%d %s: %s -> %s%s" % (
            done, total, status, dt, job["n"], mu["file"], mu["line"], mu["operator"],
            mu["original"], mu["mutated"], ("  (%s)" % killer) if killer else ""))
    return _report(args, results, modules, commit, dirty, base_s, time.monotonic() - t_start,
                   files)


def _record(mu, status, killer, dt, n_tests):
    rec = {k: mu[k] for k in ("key", "file", "line", "function", "operator", "original",
                              "mutated")}
    rec.update(status=status, killed_by=killer, seconds=round(dt, 2), tests_run=n_tests)
    return rec


def _report(args, results, modules, commit, dirty, base_s, wall_s, files):
    order = {m: i for i, m in enumerate(modules)}
    results.sort(key=lambda r: (order[r["file"][11:-3]], r["line"], r["key"]))
    reasons = load_reasons()
    prop = tuple("tests/controller/" + f for f in PROPERTY_TESTS)

    def tally(rs):
        k = sum(r["status"] in ("killed", "timeout") for r in rs)
        return {"total": len(rs), "killed": k,
                "by_property_tests": sum(bool(r["killed_by"]) and r["killed_by"].startswith(prop)
                                         for r in rs),
                "timeout": sum(r["status"] == "timeout" for r in rs),
                "survived": sum(r["status"] == "survived" for r in rs),
                "killed_pct": round(100.0 * k / len(rs), 1) if rs else None}
    survivors = []
    for r in results:
        if r["status"] == "survived":
            s = {k: r[k] for k in ("key", "file", "line", "function", "operator", "original",
                                   "mutated")}
            s["reason"] = reasons.get(r["key"])
            survivors.append(s)
    out = {
        "what": "mutation run over controller/ (python -m host_sim.mutation)",
        "commit": commit, "uncommitted_changes": dirty or "",
        "modules": modules,
        "tests": files, "excluded_tests": list(EXCLUDED_TESTS),
        "hypothesis_profile": {"name": "mutation",
                               "max_examples": int(os.environ.get("SPINRAIL_MUT_EXAMPLES", "30")),
                               "derandomize": True, "shrink": False},
        "null_run_traced_s": round(base_s, 1),
        "timeout": "max(%g s, %g x the selected tests' traced time)" % (args.min_timeout,
                                                                       args.timeout_factor),
        "wall_s": round(wall_s, 1), "jobs": args.jobs,
        "sample": ("every %dth mutant" % args.sample) if args.sample > 1 else "all mutants",
        "totals": tally(results),
        "per_module": {m: tally([r for r in results if r["file"] == "controller/%s.py" % m])
                       for m in modules},
        "per_operator": {o: tally([r for r in results if r["operator"] == o])
                         for o in sorted({r["operator"] for r in results})},
        "survivors_explained": sum(s["reason"] is not None for s in survivors),
        "survivors": survivors,
        "mutants": results,
    }
    out_path = Path(args.out)
    out_path.parent.mkdir(parents=True, exist_ok=True)
    _write_whole(out_path, json.dumps(out, indent=1) + "\n")
    t = out["totals"]
    _say("mutation: killed %d of %d (%.1f %%), %d by the property tests, %d timeouts; "
         "%d survived (%d with a written reason); %.0f s; %s"
         % (t["killed"], t["total"], t["killed_pct"] or 0, t["by_property_tests"], t["timeout"],
            t["survived"], out["survivors_explained"], wall_s, out_path))
    for s in survivors:
        _say("  survived %s:%d  %s%s" % (s["file"], s["line"], s["key"],
                                         "" if s["reason"] else "   [no reason written]"))
    return 0


def _list(mutants, args):
    if args.show:
        for mu in mutants:
            if mu["key"] in args.show:
                path = ROOT / mu["file"]
                before = ast.unparse(ast.parse(path.read_text())) + "\n"
                sys.stdout.writelines(difflib.unified_diff(
                    before.splitlines(True), mu["source"].splitlines(True),
                    mu["file"], mu["file"] + " (mutant)", n=2))
        return 0
    counts = {}
    for mu in mutants:
        counts.setdefault(mu["module"], {}).setdefault(mu["operator"], 0)
        counts[mu["module"]][mu["operator"]] += 1
        print("%s:%d\t%s" % (mu["file"], mu["line"], mu["key"]))
    for mod, c in counts.items():
        _say("%-16s %4d  %s" % (mod, sum(c.values()),
                               " ".join("%s=%d" % kv for kv in sorted(c.items()))))
    _say("total %d" % len(mutants))
    return 0


def main(argv=None):
    ap = argparse.ArgumentParser(prog="python -m host_sim.mutation", description=__doc__.split(
        "\n\n")[0])
    ap.add_argument("--modules", nargs="+", metavar="NAME",
                    help="controller modules to mutate (default: the tick's modules)")
    ap.add_argument("--profile", action="store_true",
                    help="add the profile loader modules (%s)" % ", ".join(SCOPE_PROFILE))
    ap.add_argument("--src", default=str(ROOT), metavar="DIR",
                    help="the tree to snapshot (default: this working tree)")
    ap.add_argument("--jobs", type=int, default=max(1, min(2, os.cpu_count() or 1)))
    ap.add_argument("--out", default=str(DEFAULT_OUT), help="result JSON (written whole)")
    ap.add_argument("--keys", nargs="+", metavar="KEY", help="run only these mutants")
    ap.add_argument("--sample", type=int, default=1, metavar="K",
                    help="run every K-th mutant only (a quick estimate; default: all)")
    ap.add_argument("--list", action="store_true", help="list the mutants and stop")
    ap.add_argument("--show", nargs="+", metavar="KEY", help="print these mutants as diffs")
    ap.add_argument("--timeout-factor", type=float, default=3.0,
                    help="a mutant run longer than this x the null mutant's is a timeout")
    ap.add_argument("--min-timeout", type=float, default=60.0, metavar="S")
    ap.add_argument("--baseline-timeout", type=float, default=900.0, metavar="S")
    ap.add_argument("--keep", action="store_true", help="keep the temporary snapshot")
    args = ap.parse_args(argv)
    if args.jobs < 1:
        ap.error("--jobs: %d is not allowed, give 1 or more" % args.jobs)
    return run(args)


if __name__ == "__main__":
    try:
        import pytest  # noqa: F401 (imported once here, so every forked child starts warm)
    except ImportError:
        raise SystemExit("mutation: needs pytest and hypothesis (the test extra)")
    sys.exit(main())

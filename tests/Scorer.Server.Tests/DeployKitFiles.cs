using System.ComponentModel;
using System.Diagnostics;
using System.Globalization;
using System.Text;
using System.Text.Json;
using System.Text.RegularExpressions;
using System.Xml.Linq;

namespace Scorer.Server.Tests;

/// <summary>
/// Reading the deployment kit (Dockerfile, .dockerignore, deploy/): the outside tools it is checked with (promtool,
/// Python's YAML parser), a Dockerfile reader, Docker's ignore-file rules, the metric names in PromQL text, the
/// Prometheus text format, and the files a project's build reads.
/// </summary>
internal static partial class DeployKit
{
    public static string Root => Scorer.Testing.TestRepository.Root;

    public static string PathOf(string relative) => Path.Combine(Root, relative.Replace('/', Path.DirectorySeparatorChar));

    // ---- outside tools ------------------------------------------------------------------------------------------------

    public sealed record ProcessResult(int ExitCode, string Stdout, string Stderr)
    {
        public string Output => Stdout + Stderr;
    }

    /// <summary>Runs a program to its end (killed after <paramref name="timeout"/>); fails the test when it is not installed.</summary>
    public static async Task<ProcessResult> RunAsync(string file, IEnumerable<string> args, string missingHint,
        IDictionary<string, string>? environment = null, TimeSpan? timeout = null, string? workingDirectory = null)
    {
        var start = new ProcessStartInfo(file)
        {
            RedirectStandardOutput = true,
            RedirectStandardError = true,
            UseShellExecute = false,
            WorkingDirectory = workingDirectory ?? Root,
        };
        foreach (var arg in args)
        {
            start.ArgumentList.Add(arg);
        }

        foreach (var (name, value) in environment ?? new Dictionary<string, string>())
        {
            start.Environment[name] = value;
        }

        Process process;
        try
        {
            process = Process.Start(start) ?? throw new InvalidOperationException(file + " did not start");
        }
        catch (Win32Exception ex)
        {
            Assert.Fail($"{file} is not installed ({ex.Message}): {missingHint}");
            throw;
        }

        using (process)
        {
            var stdout = process.StandardOutput.ReadToEndAsync();
            var stderr = process.StandardError.ReadToEndAsync();
            using var cancel = new CancellationTokenSource(timeout ?? TimeSpan.FromMinutes(3));
            try
            {
                await process.WaitForExitAsync(cancel.Token);
            }
            catch (OperationCanceledException)
            {
                process.Kill(entireProcessTree: true);
                Assert.Fail($"{file} {string.Join(' ', start.ArgumentList)} did not finish within {timeout ?? TimeSpan.FromMinutes(3)}");
            }

            return new ProcessResult(process.ExitCode, await stdout, await stderr);
        }
    }

    /// <summary>Prometheus's promtool (Debian package prometheus).</summary>
    public static Task<ProcessResult> PromtoolAsync(params string[] args) =>
        RunAsync("promtool", args, "install Prometheus's promtool (Debian: apt-get install prometheus); the deployment kit's rules and their tests cannot be checked without it");

    /// <summary>
    /// Every document of a YAML file, as JSON, parsed by PyYAML (Debian package python3-yaml) through /usr/bin/python3:
    /// an outside YAML 1.1 parser, the same family Kubernetes' and Prometheus's loaders follow.
    /// </summary>
    public static async Task<List<JsonElement>> ReadYamlAsync(string relative)
    {
        const string Script = "import json, sys, yaml\n"
            + "with open(sys.argv[1], encoding='utf-8') as f:\n"
            + "    json.dump(list(yaml.safe_load_all(f)), sys.stdout)\n";
        var result = await RunAsync("/usr/bin/python3", ["-c", Script, PathOf(relative)],
            "install Python 3 with PyYAML (Debian: apt-get install python3 python3-yaml)");
        if (result.ExitCode != 0 && result.Stderr.Contains("No module named 'yaml'", StringComparison.Ordinal))
        {
            Assert.Fail("PyYAML is not installed for /usr/bin/python3: apt-get install python3-yaml (the Kubernetes manifests and promtool tests are parsed with it)");
        }

        Assert.True(result.ExitCode == 0, $"{relative} is not valid YAML: {result.Stderr}");
        using var json = JsonDocument.Parse(result.Stdout);
        return [.. json.RootElement.EnumerateArray().Where(d => d.ValueKind != JsonValueKind.Null).Select(d => d.Clone())];
    }

    // ---- the Dockerfile -------------------------------------------------------------------------------------------------

    /// <summary>One instruction with its continuation lines joined; <see cref="Stage"/> counts FROM lines from 0.</summary>
    public sealed record DockerInstruction(string Keyword, string Arguments, int Stage);

    /// <summary>Instructions of a Dockerfile: comment lines dropped (inside continuations too), '\' continuations joined.</summary>
    public static List<DockerInstruction> ParseDockerfile(string text)
    {
        var instructions = new List<DockerInstruction>();
        var stage = -1;
        var current = new StringBuilder();
        foreach (var raw in text.Split('\n'))
        {
            var line = raw.TrimEnd('\r');
            var trimmed = line.TrimStart();
            if (trimmed.StartsWith('#') || (trimmed.Length == 0 && current.Length == 0))
            {
                continue;
            }

            if (line.EndsWith('\\'))
            {
                current.Append(line[..^1]).Append(' ');
                continue;
            }

            current.Append(line);
            var whole = current.ToString().Trim();
            current.Clear();
            if (whole.Length == 0)
            {
                continue;
            }

            var space = whole.IndexOfAny([' ', '\t']);
            var keyword = (space < 0 ? whole : whole[..space]).ToUpperInvariant();
            var arguments = space < 0 ? "" : whole[(space + 1)..].Trim();
            if (keyword == "FROM")
            {
                stage++;
            }

            instructions.Add(new DockerInstruction(keyword, arguments, stage));
        }

        return instructions;
    }

    /// <summary>The words of an instruction: its JSON array form, or whitespace-separated words with double quotes kept together.</summary>
    public static List<string> Words(string arguments)
    {
        if (arguments.StartsWith('['))
        {
            return JsonSerializer.Deserialize<List<string>>(arguments)!;
        }

        var words = new List<string>();
        var word = new StringBuilder();
        var quoted = false;
        foreach (var c in arguments)
        {
            if (c == '"')
            {
                quoted = !quoted;
            }
            else if (char.IsWhiteSpace(c) && !quoted)
            {
                if (word.Length > 0)
                {
                    words.Add(word.ToString());
                    word.Clear();
                }
            }
            else
            {
                word.Append(c);
            }
        }

        if (word.Length > 0)
        {
            words.Add(word.ToString());
        }

        return words;
    }

    /// <summary>A COPY instruction's flags (--from, --chown), sources and destination.</summary>
    public static (Dictionary<string, string> Flags, List<string> Sources, string Destination) Copy(DockerInstruction copy)
    {
        var words = Words(copy.Arguments);
        var flags = words.TakeWhile(w => w.StartsWith("--", StringComparison.Ordinal))
            .Select(w => w[2..].Split('=', 2)).ToDictionary(p => p[0], p => p.Length > 1 ? p[1] : "", StringComparer.Ordinal);
        var rest = words.Skip(flags.Count).ToList();
        return (flags, rest[..^1], rest[^1]);
    }

    /// <summary>The NAME=VALUE pairs of the ENV instructions, in order (quotes removed).</summary>
    public static Dictionary<string, string> Environment(IEnumerable<DockerInstruction> instructions)
    {
        var env = new Dictionary<string, string>(StringComparer.Ordinal);
        foreach (var instruction in instructions.Where(i => i.Keyword == "ENV"))
        {
            foreach (var pair in Words(instruction.Arguments))
            {
                var eq = pair.IndexOf('=', StringComparison.Ordinal);
                Assert.True(eq > 0, $"ENV {instruction.Arguments}: '{pair}' is not NAME=VALUE");
                env[pair[..eq]] = pair[(eq + 1)..];
            }
        }

        return env;
    }

    // ---- .dockerignore ---------------------------------------------------------------------------------------------------

    /// <summary>
    /// Docker's .dockerignore rules (docs.docker.com, "Dockerignore files"): patterns cleaned like Go's filepath.Clean,
    /// '*' and '?' within one path element, '**' across any number of them, '!' for exceptions, the last matching
    /// pattern wins, and a pattern that matches a parent folder matches what is inside it.
    /// </summary>
    public sealed class DockerIgnore
    {
        private readonly List<(Regex Pattern, bool Exception, string Text)> _patterns = [];

        public DockerIgnore(string text)
        {
            foreach (var raw in text.Split('\n'))
            {
                var line = raw.Trim();
                if (line.Length == 0 || line.StartsWith('#'))
                {
                    continue;
                }

                var exception = line.StartsWith('!');
                var pattern = (exception ? line[1..] : line).Trim().Trim('/');
                _patterns.Add((new Regex("^" + ToRegex(pattern) + "$", RegexOptions.CultureInvariant), exception, line));
            }
        }

        private static string ToRegex(string pattern)
        {
            var regex = new StringBuilder();
            for (var i = 0; i < pattern.Length; i++)
            {
                var c = pattern[i];
                if (c == '*' && i + 1 < pattern.Length && pattern[i + 1] == '*')
                {
                    i++;
                    if (i + 1 < pattern.Length && pattern[i + 1] == '/')
                    {
                        i++;
                        regex.Append("(.*/)?");
                    }
                    else
                    {
                        regex.Append(".*");
                    }
                }
                else
                {
                    regex.Append(c switch
                    {
                        '*' => "[^/]*",
                        '?' => "[^/]",
                        _ => Regex.Escape(c.ToString()),
                    });
                }
            }

            return regex.ToString();
        }

        /// <summary>Whether the path (relative to the context, '/'-separated) is left out of the build context.</summary>
        public bool Excludes(string relative)
        {
            var parts = relative.Trim('/').Split('/');
            var candidates = Enumerable.Range(1, parts.Length).Select(n => string.Join('/', parts[..n])).ToList();
            var excluded = false;
            foreach (var (pattern, exception, _) in _patterns)
            {
                if (candidates.Any(pattern.IsMatch))
                {
                    excluded = !exception;
                }
            }

            return excluded;
        }
    }

    // ---- what a build reads -----------------------------------------------------------------------------------------------

    /// <summary>
    /// The repository paths (relative, '/'-separated) that building <paramref name="project"/> reads: the project folders
    /// of it and of every project it references, each file an item names outside its project folder (embedded resources,
    /// protos, analyzer files), and the repository-wide build files with what they name.
    /// </summary>
    public static SortedSet<string> BuildInputs(string project)
    {
        var inputs = new SortedSet<string>(StringComparer.Ordinal) { "global.json", "Directory.Build.props", "Directory.Packages.props", ".editorconfig" };
        AddItems(PathOf("Directory.Build.props"), inputs, projectFolder: false);
        var pending = new Stack<string>([Path.GetFullPath(PathOf(project))]);
        var seen = new HashSet<string>(StringComparer.Ordinal);
        while (pending.TryPop(out var file))
        {
            if (!seen.Add(file))
            {
                continue;
            }

            Assert.True(File.Exists(file), $"the project {Relative(file)} does not exist");
            inputs.Add(Relative(Path.GetDirectoryName(file)!));
            foreach (var reference in AddItems(file, inputs, projectFolder: true))
            {
                pending.Push(reference);
            }
        }

        return inputs;
    }

    /// <summary>
    /// Adds the paths an MSBuild file's items name (outside its folder, for a project, whose folder is added whole);
    /// returns the projects it references.
    /// </summary>
    private static List<string> AddItems(string file, SortedSet<string> inputs, bool projectFolder)
    {
        var folder = Path.GetDirectoryName(file)!;
        var references = new List<string>();
        foreach (var element in XDocument.Load(file).Descendants())
        {
            var include = (string?)element.Attribute("Include") ?? (element.Name.LocalName == "Import" ? (string?)element.Attribute("Project") : null);
            if (include is null || include.StartsWith("$([", StringComparison.Ordinal) || !LooksLikePath(include))
            {
                continue;
            }

            var path = include.Replace("$(MSBuildThisFileDirectory)", folder + Path.DirectorySeparatorChar, StringComparison.Ordinal).Replace('\\', '/');
            if (path.Contains("$(", StringComparison.Ordinal))
            {
                continue; // a property this reader does not evaluate
            }

            var full = Path.GetFullPath(Path.Combine(folder, path));
            if (element.Name.LocalName == "ProjectReference")
            {
                references.Add(full);
                continue;
            }

            var wildcard = full.IndexOfAny(['*', '?']);
            var existing = wildcard < 0 ? full : Path.GetDirectoryName(full[..wildcard])!;
            var relative = Relative(existing);
            if (!relative.StartsWith("..", StringComparison.Ordinal) && !(projectFolder && IsInside(relative, Relative(folder))))
            {
                inputs.Add(relative);
            }
        }

        return references;
    }

    /// <summary>Items naming files have a folder in them; package names, usings and friend assemblies do not.</summary>
    private static bool LooksLikePath(string include) => include.Contains('/', StringComparison.Ordinal) || include.Contains('\\', StringComparison.Ordinal);

    public static string Relative(string full) => Path.GetRelativePath(Root, full).Replace(Path.DirectorySeparatorChar, '/');

    /// <summary>Whether <paramref name="path"/> is <paramref name="folder"/> or lies below it ('/'-separated, relative).</summary>
    public static bool IsInside(string path, string folder) =>
        folder is "" or "." || path == folder || path.StartsWith(folder.TrimEnd('/') + "/", StringComparison.Ordinal);

    /// <summary>Every file below a repository folder, bin/ and obj/ left out (build output, never an input).</summary>
    public static IEnumerable<string> SourceFiles(string relativeFolder)
    {
        var full = PathOf(relativeFolder);
        if (File.Exists(full))
        {
            yield return relativeFolder;
            yield break;
        }

        foreach (var file in Directory.EnumerateFiles(full, "*", SearchOption.AllDirectories))
        {
            var relative = Relative(file);
            var inFolder = relative[(relativeFolder.Length + 1)..].Split('/');
            if (!inFolder[..^1].Any(d => d is "bin" or "obj"))
            {
                yield return relative;
            }
        }
    }

    // ---- PromQL and the exposition format ---------------------------------------------------------------------------------

    [GeneratedRegex("\"(?:[^\"\\\\]|\\\\.)*\"|'(?:[^'\\\\]|\\\\.)*'|`[^`]*`")]
    private static partial Regex PromQlString();

    [GeneratedRegex(@"(?<![A-Za-z0-9_:])scorer_[A-Za-z0-9_:]*")]
    private static partial Regex ScorerIdentifier();

    /// <summary>The scorer_* metric names a PromQL expression reads (string literals, such as label values, left out).</summary>
    public static IEnumerable<string> MetricNames(string promql) =>
        ScorerIdentifier().Matches(PromQlString().Replace(promql, "\"\"")).Select(m => m.Value);

    /// <summary>The families (from # TYPE) and the sample names of a scrape in the Prometheus text format.</summary>
    public static (Dictionary<string, string> Types, HashSet<string> Samples) ParseExposition(string text)
    {
        var types = new Dictionary<string, string>(StringComparer.Ordinal);
        var samples = new HashSet<string>(StringComparer.Ordinal);
        foreach (var line in text.Split('\n'))
        {
            if (line.StartsWith("# TYPE ", StringComparison.Ordinal))
            {
                var parts = line.Split(' ');
                types[parts[2]] = parts[3].Trim();
            }
            else if (line.Length > 0 && line[0] != '#')
            {
                var end = line.IndexOfAny(['{', ' ']);
                samples.Add(end < 0 ? line : line[..end]);
            }
        }

        return (types, samples);
    }

    /// <summary>
    /// Whether a name used in PromQL is exported with at least one sample: a family's own samples, or a histogram's
    /// (summary's) _bucket, _sum and _count series, whose family is the name without that suffix.
    /// </summary>
    public static bool IsExported(string name, Dictionary<string, string> types, HashSet<string> samples)
    {
        if (types.TryGetValue(name, out var type))
        {
            return type is not ("histogram" or "summary") && samples.Contains(name);
        }

        foreach (var suffix in new[] { "_bucket", "_sum", "_count" })
        {
            if (name.EndsWith(suffix, StringComparison.Ordinal) && types.TryGetValue(name[..^suffix.Length], out var family))
            {
                return (family == "histogram" || (family == "summary" && suffix != "_bucket")) && samples.Contains(name);
            }
        }

        return false;
    }

    /// <summary>Every PromQL text of a Grafana dashboard: the panels' targets (rows' nested panels too) and the variables' queries.</summary>
    public static List<(string Where, string Expr, bool IsPromQl)> DashboardQueries(JsonElement dashboard)
    {
        var found = new List<(string, string, bool)>();
        void Panels(JsonElement panels)
        {
            foreach (var panel in panels.EnumerateArray())
            {
                if (panel.TryGetProperty("targets", out var targets))
                {
                    foreach (var t in targets.EnumerateArray().Where(t => t.TryGetProperty("expr", out _)))
                    {
                        found.Add(($"panel '{panel.GetProperty("title").GetString()}' {t.GetProperty("refId").GetString()}", t.GetProperty("expr").GetString()!, true));
                    }
                }

                if (panel.TryGetProperty("panels", out var nested))
                {
                    Panels(nested);
                }
            }
        }

        Panels(dashboard.GetProperty("panels"));
        foreach (var variable in dashboard.GetProperty("templating").GetProperty("list").EnumerateArray().Where(v => v.GetProperty("type").GetString() == "query"))
        {
            var query = variable.GetProperty("query");
            var text = query.ValueKind == JsonValueKind.Object ? query.GetProperty("query").GetString()! : query.GetString()!;
            found.Add(($"variable ${variable.GetProperty("name").GetString()}", text, false)); // label_values(…) is Grafana's, not PromQL
        }

        return found;
    }

    /// <summary>Grafana's variables in a panel query replaced by values PromQL accepts (intervals by 5m).</summary>
    public static string WithoutGrafanaVariables(string expr) =>
        GrafanaInterval().Replace(expr, "5m");

    [GeneratedRegex(@"\$__(rate_interval|interval|range)")]
    private static partial Regex GrafanaInterval();

    /// <summary>The port of a HOST:PORT setting.</summary>
    public static int Port(string endpoint) => int.Parse(endpoint[(endpoint.LastIndexOf(':') + 1)..], CultureInfo.InvariantCulture);
}

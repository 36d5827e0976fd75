using System.Reflection;
using Xunit.Abstractions;
using Xunit.Sdk;

[assembly: TestFramework("Scorer.Store.Tests.PostgresTestFramework", "Scorer.Store.Tests")]

namespace Scorer.Store.Tests;

/// <summary>Marks a test class that needs a PostgreSQL server; without one its tests are reported as skipped.</summary>
[AttributeUsage(AttributeTargets.Class, Inherited = false)]
public sealed class RequiresPostgresAttribute : Attribute
{
}

/// <summary>
/// xunit's own framework, except that when <see cref="PostgresServer.SkipReason"/> says no PostgreSQL server can be had,
/// every test of a <see cref="RequiresPostgresAttribute"/> class is discovered as skipped, with that reason.
/// </summary>
/// <remarks>
/// xunit 2 decides skipping when it discovers a test, from the [Fact]'s Skip; the contract tests are plain [Fact]s
/// declared once, in the abstract class, for every driver, so the PostgreSQL binding cannot set Skip on them. The
/// discoverer here swaps each discovered test case of such a class for a skipped one (xunit's own
/// <see cref="XunitSkippedDataRowTestCase"/>): the run lists them as skipped, and never starts them.
/// </remarks>
public sealed class PostgresTestFramework(IMessageSink messageSink) : XunitTestFramework(messageSink)
{
    protected override ITestFrameworkDiscoverer CreateDiscoverer(IAssemblyInfo assemblyInfo) =>
        new Discoverer(assemblyInfo, SourceInformationProvider, DiagnosticMessageSink);

    private sealed class Discoverer(IAssemblyInfo assemblyInfo, ISourceInformationProvider sourceProvider, IMessageSink diagnosticMessageSink)
        : XunitTestFrameworkDiscoverer(assemblyInfo, sourceProvider, diagnosticMessageSink)
    {
        private readonly IMessageSink _diagnostics = diagnosticMessageSink;

        protected override bool FindTestsForMethod(ITestMethod testMethod, bool includeSourceInformation, IMessageBus messageBus,
            ITestFrameworkDiscoveryOptions discoveryOptions)
        {
            var type = testMethod.TestClass.Class is IReflectionTypeInfo reflected ? reflected.Type : null;
            if (type?.GetCustomAttribute<RequiresPostgresAttribute>() is null || PostgresServer.SkipReason is not { } reason)
            {
                return base.FindTestsForMethod(testMethod, includeSourceInformation, messageBus, discoveryOptions);
            }

            using var skipping = new SkippingBus(messageBus, reason, _diagnostics, discoveryOptions);
            return base.FindTestsForMethod(testMethod, includeSourceInformation, skipping, discoveryOptions);
        }
    }

    /// <summary>Passes every message on, a discovered test case replaced by a skipped one.</summary>
    private sealed class SkippingBus(IMessageBus inner, string reason, IMessageSink diagnostics, ITestFrameworkDiscoveryOptions options) : IMessageBus
    {
        public bool QueueMessage(IMessageSinkMessage message)
        {
            if (message is ITestCaseDiscoveryMessage discovered)
            {
                var testCase = discovered.TestCase;
                var skipped = new XunitSkippedDataRowTestCase(diagnostics, options.MethodDisplayOrDefault(), options.MethodDisplayOptionsOrDefault(),
                    testCase.TestMethod, reason, testCase.TestMethodArguments)
                {
                    SourceInformation = testCase.SourceInformation,
                };
                return inner.QueueMessage(new TestCaseDiscoveryMessage(skipped));
            }

            return inner.QueueMessage(message);
        }

        public void Dispose()
        {
        }
    }
}

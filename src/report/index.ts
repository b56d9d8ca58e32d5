export { CHART_PALETTE, escapeXml, formatTick, niceTicks, renderChartStack, renderLineChart } from './svg-chart.ts';
export type {
  ChartBand,
  ChartHLine,
  ChartLegendEntry,
  ChartMarker,
  ChartOptions,
  ChartPanel,
  ChartPoint,
  ChartSeries,
  LineStyle,
  NiceTicks,
} from './svg-chart.ts';
